"""From a mask to a :class:`~skelmorph.graph.SkeletonGraph`.

Steps (every one vectorised over voxels; Python loops run only over the few
nodes that pruning changes):

1. Thin the mask (:mod:`skelmorph.thinning`, or scikit-image's thinning
   via :mod:`skelmorph.skeleton`).
2. Find the 26- (8-) neighbours of every centreline voxel by binary search on
   sorted linear indices, dropping *redundant* diagonal links: a link whose
   two voxels are also joined through a face-neighbour path of the skeleton.
   Without this, every staircase corner would look like a junction.
3. Classify voxels by neighbour count: tips (1), path voxels (2), junction
   voxels (>= 3).  Touching junction voxels form one node, placed on the
   cluster voxel nearest the cluster's centroid.
4. Order the path voxels of every branch with a linear walk along each chain;
   inside a junction cluster a branch continues through the cluster's voxels
   to its node voxel (shortest paths), so no polyline jumps.
5. Radii: read from the thinning's distance map (scikit-image's thinning:
   exact nearest-background search by distance shells, a KD-tree for the
   rare thick points); per branch, the volume-equivalent radius
   (:mod:`skelmorph.radius`).
6. Loop check: thinning preserves the Euler characteristic, so the graph
   must have components + cavities - chi loops; tiny voxel cycles beyond
   that are removed.
7. Clean-up, repeated until stable: contract edges of at most
   ``MERGE_MAX_VOXELS`` voxels joining two junctions closer than the sum of
   their radii; prune terminal spurs shorter than ``prune_factor`` x the
   junction radius (or ``min_branch_length``); dissolve nodes left with two
   edges.
8. Smooth every polyline (ends fixed) and measure its length.
"""

from __future__ import annotations

import dataclasses
import itertools
import time
from contextlib import contextmanager

import numpy as np
from scipy import ndimage as ndi
from scipy import sparse
from scipy.sparse import csgraph
from scipy.spatial import cKDTree

from .grid import c_strides, forward_offsets

from ._version import __version__
from .errors import InputError
from .graph import SkeletonGraph
from .io import check_image_array, normalise_unit, validate_spacing
from ._kernels import branch_voxel_paths, cyclic_block_voxels, kruskal, walk_paths
from .polyline import polyline_lengths, smooth_polylines
from .radius import equivalent_radius
from .segment import as_bool_mask, check_mask, count_cavities, is_binary
from .skeleton import resample_isotropic, skeletonize

__all__ = ["skeleton_graph", "graph_from_skeleton", "centreline_radius"]


@contextmanager
def _timed(timings, name):
    t0 = time.perf_counter()
    yield
    if timings is not None:
        timings[name] = timings.get(name, 0.0) + time.perf_counter() - t0


# ----------------------------------------------------------------------------- voxels

def _intermediates(off):
    """Offsets w (0 < w < off componentwise) through which a link ``off`` is redundant."""
    nz = np.flatnonzero(off)
    out = []
    for r in range(1, len(nz)):
        for sub in itertools.combinations(nz, r):
            w = np.zeros_like(off)
            w[list(sub)] = off[list(sub)]
            out.append(w)
    return out


def voxel_links(coords, shape):
    """Non-redundant neighbour links between centreline voxels.

    Parameters
    ----------
    coords : (n, d) int array
        Voxel indices, sorted in C order (as ``np.nonzero`` returns them).
    shape : tuple

    Returns
    -------
    (m, 2) int array of voxel index pairs ``i < j``.
    """
    ndim = coords.shape[1]
    pshape = np.asarray(shape, dtype=np.int64) + 2  # padding: no wrap-around at the edges
    strides = c_strides(pshape)
    lin = (coords.astype(np.int64) + 1) @ strides
    # Presence by a gather from the padded volume; positions by binary search
    # only for the links that exist.
    occupied = np.zeros(int(np.prod(pshape)), bool)
    occupied[lin] = True

    pairs = []
    for off in forward_offsets(ndim):
        off_lin = int(off @ strides)
        i = np.flatnonzero(occupied[lin + off_lin])
        if np.abs(off).sum() >= 2 and len(i):
            redundant = np.zeros(len(i), bool)
            for w in _intermediates(off):
                redundant |= occupied[lin[i] + int(w @ strides)]
            i = i[~redundant]
        j = np.searchsorted(lin, lin[i] + off_lin)
        pairs.append(np.column_stack([i, j]))
    return np.concatenate(pairs) if pairs else np.zeros((0, 2), np.int64)


def small_cycle_voxels(coords, links, shape):
    """Voxels of 2x2(x2) blocks whose links close a cycle.

    All voxels of a 2x2x2 block are mutually 26-adjacent, so a cycle inside
    one block encloses no background: it is not a loop of the structure.
    Such voxels are made part of a junction node, where the cycle collapses.
    A block holds a cycle when its links are at least as many as its voxels
    (at least three).  Counted per block by a numba kernel that touches only
    the blocks of centreline voxels (a 2D image is a one-slice volume).
    """
    n, ndim = coords.shape
    if n == 0 or len(links) == 0:
        return np.zeros(n, bool)
    base = coords.astype(np.int64) + 1
    shape = tuple(shape)
    if ndim == 2:
        base = np.column_stack([np.ones(n, np.int64), base])
        shape = (1,) + shape
    bshape = np.asarray(shape, np.int64) + 1
    return cyclic_block_voxels(base, np.ascontiguousarray(links, np.int64), bshape)


def euler_characteristic(coords, shape, labels=None):
    """Euler characteristic of a sparse voxel set, 26- (3D) or 8- (2D) connected.

    With full connectivity the set is the union of closed unit cubes, a
    cubical complex, so chi = sum over k of (-1)^k x (number of k-cells),
    a k-cell being a lattice point plus k axis directions.  Each voxel
    contributes the 3**d cells of its closed cube.  Matches
    ``skimage.measure.euler_number(mask, connectivity=ndim)`` (tested).

    Parameters
    ----------
    coords : (n, d) int array of voxel indices
    shape : tuple, the array shape
    labels : (n,) int array, optional
        Labels of non-adjacent voxel groups (e.g. junction clusters): then the
        Euler characteristic of every group is returned, as an array indexed
        by label.  Distinct cells are counted with ``np.unique`` here, and by
        marking a boolean lattice (no sort) for the whole set.

    Returns
    -------
    int, or int array when ``labels`` is given
    """
    coords = np.asarray(coords, np.int64)
    if len(coords) == 0:
        return 0 if labels is None else np.zeros(0, np.int64)
    ndim = coords.shape[1]
    lattice = np.asarray(shape, np.int64) + 1  # cube corners run 0..shape
    strides = c_strides(lattice)
    base = coords @ strides
    if labels is None:
        marks = np.zeros(int(np.prod(lattice)), bool)
    else:
        chi_of = np.zeros(int(labels.max()) + 1, np.int64)
    chi = 0
    for k in range(ndim + 1):
        for along in itertools.combinations(range(ndim), k):
            across = [a for a in range(ndim) if a not in along]
            # Cells spanning `along` at the cube's corners offset across the rest.
            shifts = [int(sum(c * strides[a] for c, a in zip(corner, across)))
                      for corner in itertools.product((0, 1), repeat=len(across))]
            if labels is None:
                for shift in shifts:
                    marks[base + shift] = True
                chi += (-1) ** k * int(np.count_nonzero(marks))
                marks[:] = False
            else:
                cells = (base[:, None] + np.array(shifts)[None]).ravel()
                _, first = np.unique(cells, return_index=True)
                owner = np.repeat(labels, len(shifts))[first]
                chi_of += (-1) ** k * np.bincount(owner, minlength=len(chi_of))
    return chi if labels is None else chi_of


def _boundary_background(mask):
    """Background voxels that touch the object (26/8-neighbourhood)."""
    grown = mask.view(np.uint8)
    for axis in range(mask.ndim):  # separable 3x3(x3) dilation
        grown = ndi.maximum_filter1d(grown, 3, axis=axis, mode="constant")
    return grown.astype(bool) & ~mask


def _radius_kdtree(mask, coords, spacing):
    border = _boundary_background(mask)
    flat = np.flatnonzero(border)
    if len(flat) == 0:
        raise InputError("the mask has no background voxels; radii are undefined")
    pts = np.column_stack(np.unravel_index(flat, mask.shape)) * np.asarray(spacing, float)
    tree = cKDTree(pts, balanced_tree=False, compact_nodes=False)
    return tree.query(np.asarray(coords) * np.asarray(spacing, float), workers=-1)[0]


def _radius_shells(mask, coords, spacing, reach):
    """Nearest background by searching offsets in order of increasing distance.

    Exact: all offsets at the same physical distance form one shell, and a
    point is resolved at the first shell that holds a background voxel.
    Cost grows with r**3 per point, so points with no background within
    ``reach`` voxels are returned as NaN (the KD-tree finishes them).
    """
    sp = np.asarray(spacing, float)
    limit = reach * sp.min()
    half = np.ceil(limit / sp).astype(int)
    grids = np.meshgrid(*[np.arange(-h, h + 1) for h in half], indexing="ij")
    offs = np.stack([g.ravel() for g in grids], axis=1)
    dist = np.linalg.norm(offs * sp, axis=1)
    keep = (dist > 0) & (dist <= limit)
    offs, dist = offs[keep], dist[keep]
    order = np.argsort(dist, kind="stable")
    offs, dist = offs[order], dist[order]
    key = np.round(dist, 9)
    shell_start = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    shell_end = np.r_[shell_start[1:], len(dist)]
    # Outside the array is not background (as for the Euclidean distance transform).
    padded = np.pad(mask, [(h, h) for h in half], constant_values=True).ravel()
    pshape = np.asarray(mask.shape) + 2 * half
    strides = c_strides(pshape)
    lin = (np.asarray(coords, np.int64) + half) @ strides
    off_lin = offs.astype(np.int64) @ strides
    result = np.full(len(lin), np.nan)
    todo = np.arange(len(lin))
    for a, b in zip(shell_start, shell_end):
        hit = ~padded[lin[todo, None] + off_lin[None, a:b]]
        found = hit.any(axis=1)
        result[todo[found]] = dist[a]
        todo = todo[~found]
        if len(todo) == 0:
            break
    return result


def centreline_radius(mask, coords, spacing, method="shells", reach=12):
    """Distance from voxels ``coords`` to the nearest background voxel centre.

    Equal to ``scipy.ndimage.distance_transform_edt(mask, sampling=spacing)``
    at those voxels (the array edge is not background), without computing
    the distance transform of the whole volume.

    Parameters
    ----------
    mask : ndarray of bool
    coords : (n, d) int array
    spacing : tuple of float
    method : {"shells", "kdtree", "edt"}
        ``"shells"`` searches neighbour offsets in order of distance up to
        ``reach`` voxels, then a KD-tree for the few thicker points;
        ``"kdtree"`` queries a KD-tree of the background voxels touching the
        object (the nearest background voxel always touches the object);
        ``"edt"`` computes the full distance transform (reference).
    reach : int
        Search radius of ``"shells"``, in voxels of the finest axis.

    Returns
    -------
    (n,) float array, in the units of ``spacing``.
    """
    coords = np.asarray(coords)
    if len(coords) == 0:
        return np.zeros(0)
    if method == "edt":
        dist = ndi.distance_transform_edt(mask, sampling=spacing)
        return dist[tuple(coords.T)]
    if method == "kdtree":
        return _radius_kdtree(mask, coords, spacing)
    result = _radius_shells(mask, coords, spacing, reach)
    rest = np.isnan(result)
    if rest.any():
        result[rest] = _radius_kdtree(mask, coords[rest], spacing)
    return result


def _restore_vanished(mask, skel):
    """Give every mask component that thinning erased one centreline voxel.

    scikit-image's 3D thinning can delete a whole component (e.g. a box with
    an even cross-section); a centre voxel keeps the component in the graph.
    """
    structure = ndi.generate_binary_structure(mask.ndim, mask.ndim)
    labels, n = ndi.label(mask, structure=structure)
    if n == 0:
        return skel
    has = np.zeros(n + 1, bool)
    has[labels[skel]] = True
    missing = np.flatnonzero(~has[1:]) + 1
    if len(missing) == 0:
        return skel
    skel = skel.copy()
    slices = ndi.find_objects(labels)
    for lab in missing:  # only the vanished components
        sl = slices[lab - 1]
        crop = labels[sl] == lab
        dist = ndi.distance_transform_edt(np.pad(crop, 1))[(slice(1, -1),) * mask.ndim]
        idx = np.unravel_index(np.argmax(dist), crop.shape)
        skel[tuple(s.start + i for s, i in zip(sl, idx))] = True
    return skel


# ----------------------------------------------------------------------------- raw graph

class _Work:
    """Editable graph during clean-up: node arrays + per-edge point lists."""

    def __init__(self, node_pos, node_r, protected, u, v, pts, rad, shape, spacing):
        self.node_pos = node_pos
        self.node_r = node_r
        self.protected = protected  # isolated points: kept even with degree 0
        self.u = list(u)
        self.v = list(v)
        self.pts = pts
        self.rad = rad
        self.shape = shape  # image shape and spacing, for border tests
        self.spacing = spacing

    def keep_edges(self, keep):
        """Keep only the edges with indices ``keep`` (in that order)."""
        self.u = [self.u[e] for e in keep]
        self.v = [self.v[e] for e in keep]
        self.pts = [self.pts[e] for e in keep]
        self.rad = [self.rad[e] for e in keep]

    def near_border(self, nodes):
        """True for nodes within their radius (+1.5 voxels) of an image face."""
        sp = np.asarray(self.spacing)
        pos = self.node_pos[nodes]
        gap = np.minimum(pos + 0.5 * sp, (np.asarray(self.shape) - 0.5) * sp - pos).min(axis=1)
        return gap <= self.node_r[nodes] + 1.5 * sp.max()

    def degree(self):
        deg = np.zeros(len(self.node_pos), np.int64)
        np.add.at(deg, np.asarray(self.u, np.int64), 1)
        np.add.at(deg, np.asarray(self.v, np.int64), 1)
        return deg

    def raw_lengths(self):
        if not self.pts:
            return np.zeros(0)
        counts = np.fromiter((len(p) for p in self.pts), np.int64, len(self.pts))
        offsets = np.concatenate([[0], np.cumsum(counts)])
        return polyline_lengths(np.concatenate(self.pts), offsets)


def _raw_graph(skel, mask, spacing, radius_method, timings, dist_sq=None):
    """Nodes and point-ordered edges straight from the centreline voxels."""
    sp = np.asarray(spacing, float)
    with _timed(timings, "graph"):
        coords = np.argwhere(skel)
        n = len(coords)
        links = voxel_links(coords, skel.shape)
        deg = np.bincount(links.ravel(), minlength=n)
    with _timed(timings, "radii"):
        if dist_sq is not None:
            vox_r = np.sqrt(dist_sq[tuple(coords.T)].astype(np.float64))
        else:
            vox_r = centreline_radius(mask, coords, spacing, method=radius_method)
    with _timed(timings, "graph"):
        clique = small_cycle_voxels(coords, links, skel.shape)
        is_node = (deg != 2) | clique
        # Rings without any junction: promote one voxel per ring to an anchor node.
        path_links = links[~is_node[links[:, 0]] & ~is_node[links[:, 1]]]
        ncomp, lab = _components(n, path_links)
        slab_deg = np.bincount(path_links.ravel(), minlength=n)
        touches = np.zeros(ncomp, bool)
        touches[lab[~is_node & (slab_deg < 2)]] = True
        touches[lab[is_node]] = True
        ring_comps = np.flatnonzero(~touches)
        if len(ring_comps):
            anchor_of = np.full(ncomp, -1)
            cand = np.flatnonzero(np.isin(lab, ring_comps))
            first = np.unique(lab[cand], return_index=True)[1]
            anchor_of[lab[cand[first]]] = cand[first]
            is_node = is_node.copy()
            is_node[anchor_of[ring_comps]] = True
            path_links = links[~is_node[links[:, 0]] & ~is_node[links[:, 1]]]
            slab_deg = np.bincount(path_links.ravel(), minlength=n)

        # Node ids: touching junction voxels (degree >= 3) form one node.
        junction = (deg >= 3) | clique
        jlinks = links[junction[links[:, 0]] & junction[links[:, 1]]]
        _, jlab = _components(n, jlinks)
        node_vox = np.flatnonzero(is_node)
        key = np.where(junction[node_vox], jlab[node_vox], n + node_vox)  # others stand alone
        uniq, node_id_of = np.unique(key, return_inverse=True)
        node_of_voxel = np.full(n, -1)
        node_of_voxel[node_vox] = node_id_of
        n_nodes = len(uniq)
        pos_vox = coords * sp
        # A node sits on the voxel of its cluster nearest the cluster's centroid;
        # branch ends reach it through the cluster's voxels (no straight jumps).
        centroid = np.zeros((n_nodes, coords.shape[1]))
        np.add.at(centroid, node_id_of, pos_vox[node_vox])
        centroid /= np.bincount(node_id_of, minlength=n_nodes)[:, None]
        gap = ((pos_vox[node_vox] - centroid[node_id_of]) ** 2).sum(axis=1)
        pick = np.lexsort((node_vox, gap, node_id_of))
        first_of = np.unique(node_id_of[pick], return_index=True)[1]
        centre_vox = node_vox[pick[first_of]]
        node_pos = pos_vox[centre_vox].copy()
        pred = _cluster_predecessors(n, jlinks, centre_vox[junction[centre_vox]], pos_vox)
        node_r = np.zeros(n_nodes)
        np.maximum.at(node_r, node_id_of, vox_r[node_vox])
        protected = np.zeros(n_nodes, bool)
        protected[node_of_voxel[node_vox[deg[node_vox] == 0]]] = True
        loops_u, loops_pts, loops_rad = _cluster_tunnels(
            coords, junction, node_of_voxel, links, pos_vox, vox_r, node_pos, node_r, skel.shape)

        # Path voxels: order every branch with one depth-first traversal.
        slab = np.flatnonzero(~is_node)
        u_list, v_list, pts_list, rad_list = [], [], [], []
        if len(slab):
            ncomp, lab = _components(n, path_links)
            ends = slab[slab_deg[slab] < 2]
            _, first = np.unique(lab[ends], return_index=True)
            starts = np.sort(ends[first])
            both = np.concatenate([path_links, path_links[:, ::-1]])
            both = both[np.lexsort((both[:, 1], both[:, 0]))]
            link_start = np.searchsorted(both[:, 0], np.arange(n + 1))
            order = walk_paths(n, link_start, both[:, 1], starts)
            olab = lab[order]
            cut = np.flatnonzero(np.diff(olab)) + 1
            bounds = np.concatenate([[0], cut, [len(order)]])
            # Node neighbours of each path voxel (first and last, in link order).
            nl = links[is_node[links[:, 0]] != is_node[links[:, 1]]]
            sv = np.where(is_node[nl[:, 0]], nl[:, 1], nl[:, 0])
            nv = np.where(is_node[nl[:, 0]], nl[:, 0], nl[:, 1])
            srt = np.argsort(sv, kind="stable")
            sv, nv = sv[srt], nv[srt]
            uv, idx, cnt = np.unique(sv, return_index=True, return_counts=True)
            first_att = np.full(n, -1)
            last_att = np.full(n, -1)
            s_vox, e_vox = order[bounds[:-1]], order[bounds[1:] - 1]
            first_att[uv] = nv[idx]
            last_att[uv] = nv[idx + cnt - 1]
            fa, la = first_att[s_vox], last_att[e_vox]
        else:
            order, bounds = np.zeros(0, np.int64), np.zeros(1, np.int64)
            fa = la = np.zeros(0, np.int64)
        # Direct node-node links (e.g. a one-voxel spur on a junction): a
        # branch without path voxels, one per pair of nodes.
        nn = links[is_node[links[:, 0]] & is_node[links[:, 1]]]
        a, b = node_of_voxel[nn[:, 0]], node_of_voxel[nn[:, 1]]
        diff = np.flatnonzero(a != b)
        if len(diff):
            key_pairs = np.sort(np.column_stack([a[diff], b[diff]]), axis=1)
            _, one = np.unique(key_pairs, axis=0, return_index=True)
            pick = diff[np.sort(one)]
            fa = np.concatenate([fa, nn[pick, 0]])
            la = np.concatenate([la, nn[pick, 1]])
            bounds = np.concatenate([bounds, np.full(len(pick), bounds[-1])])
        if len(fa):
            vox_idx, offs = branch_voxel_paths(order, bounds, fa, la, pred)
            eu, ev = node_of_voxel[fa], node_of_voxel[la]
            flat = pos_vox[vox_idx]
            flat_r = vox_r[vox_idx]
            flat_r[offs[:-1]], flat_r[offs[1:] - 1] = node_r[eu], node_r[ev]
            pts_list = [flat[a:b] for a, b in zip(offs[:-1].tolist(), offs[1:].tolist())]
            rad_list = [flat_r[a:b] for a, b in zip(offs[:-1].tolist(), offs[1:].tolist())]
            u_list, v_list = list(eu), list(ev)
        u_list, v_list = list(u_list) + loops_u, list(v_list) + loops_u
        pts_list, rad_list = list(pts_list) + loops_pts, list(rad_list) + loops_rad
    return _Work(node_pos, node_r, protected, u_list, v_list, pts_list, rad_list,
                 skel.shape, spacing)


def _cluster_predecessors(n, jlinks, sources, pos_vox):
    """Shortest-path predecessors inside junction clusters, towards each
    cluster's node voxel (``sources``); -1 at node voxels and elsewhere."""
    pred = np.full(n, -1, np.int64)
    if len(jlinks) == 0 or len(sources) == 0:
        return pred
    w = np.linalg.norm(pos_vox[jlinks[:, 0]] - pos_vox[jlinks[:, 1]], axis=1)
    g = sparse.coo_matrix((w, (jlinks[:, 0], jlinks[:, 1])), shape=(n, n)).tocsr()
    _, p, _ = csgraph.dijkstra(g, directed=False, indices=sources, min_only=True,
                            return_predecessors=True)
    return np.where(p >= 0, p, -1).astype(np.int64)


def _cluster_tunnels(coords, junction, node_of_voxel, links, pos_vox, vox_r, node_pos, node_r,
                     shape):
    """Loops that lie wholly inside a junction cluster, as self-loops of its node.

    A cluster becomes one node, which would silently drop any tunnel the
    cluster's voxels enclose (thick junctions can thin to a tiny ring whose
    voxels all have branches).  A connected cluster without cavities has
    1 - chi tunnels; each is kept as a self-loop traced through the cluster
    along one of its longest cycles (the short ones are the filled 2x2x2
    cycles that enclose nothing).
    """
    jvox = np.flatnonzero(junction)
    empty = ([], [], [])
    if len(jvox) < 4:
        return empty
    node = node_of_voxel[jvox]
    sizes = np.bincount(node)
    big = sizes[node] >= 4  # a tunnel needs at least four voxels
    if not big.any():
        return empty
    chi = euler_characteristic(coords[jvox[big]], shape, labels=node[big])
    tunnels = np.flatnonzero((1 - chi) * (sizes[: len(chi)] >= 4) > 0)
    if len(tunnels) == 0:
        return empty
    import networkx as nx

    same = junction[links[:, 0]] & junction[links[:, 1]]
    jl = links[same]
    jl_node = node_of_voxel[jl[:, 0]]
    loops_u, loops_pts, loops_rad = [], [], []
    for nd in tunnels:  # rare: clusters that enclose a tunnel
        g = nx.Graph()
        g.add_edges_from(map(tuple, jl[jl_node == nd].tolist()))
        cycles = sorted(nx.cycle_basis(g), key=len, reverse=True)
        for cycle in cycles[: int(1 - chi[nd])]:
            loops_u.append(int(nd))
            loops_pts.append(np.vstack([node_pos[nd], pos_vox[cycle], node_pos[nd]]))
            loops_rad.append(np.concatenate([[node_r[nd]], vox_r[cycle], [node_r[nd]]]))
    return loops_u, loops_pts, loops_rad


def _components(n, links):
    if len(links) == 0:
        return n, np.arange(n)
    g = sparse.coo_matrix((np.ones(len(links)), (links[:, 0], links[:, 1])), shape=(n, n))
    return csgraph.connected_components(g, directed=False)


# ----------------------------------------------------------------------------- clean-up

#: Longest branch (in voxels of the coarsest axis) that junction merging contracts.
MERGE_MAX_VOXELS = 3.0


def _merge_close_junctions(w):
    """Contract short edges between two junctions closer than the sum of their radii.

    Contracting an edge keeps E - V + C, so loops are never created or lost.
    """
    deg = w.degree()
    u, v = np.asarray(w.u, np.int64), np.asarray(w.v, np.int64)
    if len(u) == 0:
        return False
    dist = np.linalg.norm(w.node_pos[u] - w.node_pos[v], axis=1)
    # Close: within the sum of the radii, joined by a branch no longer than
    # the thicker junction's radius nor MERGE_MAX_VOXELS voxels.  Contraction
    # joins the merged node's branches by straight segments of up to that
    # length, so the cap keeps them within voxel noise of the centreline:
    # thick structures (radius large against their mesh) keep their branches.
    reach = np.minimum(np.maximum(w.node_r[u], w.node_r[v]), MERGE_MAX_VOXELS * max(w.spacing))
    close = ((u != v) & (deg[u] >= 3) & (deg[v] >= 3) & (dist < w.node_r[u] + w.node_r[v])
             & (w.raw_lengths() <= reach))
    if not close.any():
        return False
    n = len(w.node_pos)
    # Contract a spanning forest of the close edges only; the others close a
    # loop and stay, as self-loops of the merged node.
    close = kruskal(n, u.astype(np.int64), v.astype(np.int64), np.flatnonzero(close))
    _, group = _components(n, np.column_stack([u[close], v[close]]))
    # Representative of each group: its member with the largest radius.
    order = np.lexsort((-w.node_r, group))
    rep_of_group = np.full(group.max() + 1, -1)
    firsts = np.unique(group[order], return_index=True)[1]
    rep_of_group[group[order][firsts]] = order[firsts]
    rep = rep_of_group[group]
    keep = np.flatnonzero(~close)
    new_u, new_v = rep[u[keep]], rep[v[keep]]
    pts = [w.pts[e] for e in keep.tolist()]
    rad = [w.rad[e] for e in keep.tolist()]
    moved = np.flatnonzero((new_u != u[keep]) | (new_v != v[keep]))
    for i in moved.tolist():  # only the branches whose end node was merged away
        a, b = new_u[i], new_v[i]
        p, r = pts[i].copy(), rad[i].copy()
        p[0], p[-1] = w.node_pos[a], w.node_pos[b]
        r[0], r[-1] = w.node_r[a], w.node_r[b]
        pts[i], rad[i] = p, r
    w.u, w.v, w.pts, w.rad = list(new_u), list(new_v), pts, rad
    return True


def _prune_spurs(w, factor, min_length):
    """Remove terminal edges shorter than max(factor x junction radius, min_length).

    A tip on the image border is a cut through the structure, not a spur, and
    is kept.  Only edges from a tip to a junction (degree >= 3) are candidates, so
    pruning never breaks a loop or disconnects a component; when every edge
    of a junction is a candidate the longest one stays.
    """
    deg = w.degree()
    u, v = np.asarray(w.u, np.int64), np.asarray(w.v, np.int64)
    if len(u) == 0:
        return False
    length = w.raw_lengths()
    tip_u, tip_v = deg[u] == 1, deg[v] == 1
    junction = np.where(tip_u, v, u)
    terminal = (tip_u ^ tip_v) & (deg[junction] >= 3)
    limit = np.maximum(factor * w.node_r[junction], min_length)
    cand = terminal & (length <= limit) & ~w.near_border(np.where(tip_u, u, v))
    if not cand.any():
        return False
    # A junction whose every edge is a candidate keeps its longest one.
    n_cand = np.bincount(junction[cand], minlength=len(deg))
    full = np.flatnonzero((n_cand >= deg) & (n_cand > 0))
    for j in full:  # rare: star-shaped remnants
        idx = np.flatnonzero(cand & (junction == j))
        cand[idx[np.argmax(length[idx])]] = False
    w.keep_edges(np.flatnonzero(~cand))
    return True


def _dissolve_degree_two(w):
    """Join the two edges at every node of degree 2 (except ring anchors)."""
    deg = w.degree()
    cand = np.flatnonzero(deg == 2)
    if len(cand) == 0:
        return False
    incident = {int(c): [] for c in cand}
    for e, (a, b) in enumerate(zip(w.u, w.v)):
        if a in incident:
            incident[a].append(e)
        if b in incident and b != a:
            incident[b].append(e)
    alive = [True] * len(w.u)
    changed = False
    for node in cand:  # nodes that pruning or merging left with two edges
        node = int(node)
        es = [e for e in incident[node] if alive[e]]
        if len(es) != 2:
            continue  # a ring anchor (one self-loop) or already handled
        e1, e2 = es
        p1, r1 = (w.pts[e1], w.rad[e1]) if w.v[e1] == node else (w.pts[e1][::-1], w.rad[e1][::-1])
        a = w.u[e1] if w.v[e1] == node else w.v[e1]
        p2, r2 = (w.pts[e2], w.rad[e2]) if w.u[e2] == node else (w.pts[e2][::-1], w.rad[e2][::-1])
        b = w.v[e2] if w.u[e2] == node else w.u[e2]
        alive[e1] = alive[e2] = False
        w.u.append(a)
        w.v.append(b)
        w.pts.append(np.concatenate([p1, p2[1:]]))
        w.rad.append(np.concatenate([r1, r2[1:]]))
        alive.append(True)
        new = len(w.u) - 1
        for end in (a, b):
            if end in incident:
                incident[end] = [new if x in (e1, e2) else x for x in incident[end]]
                if a == b and end == a:
                    incident[end] = list(dict.fromkeys(incident[end]))
        changed = True
    w.keep_edges([e for e in range(len(w.u)) if alive[e]])
    return changed


def _extend_tips(w):
    """Lengthen every terminal edge by its tip radius along its end direction.

    Thinning stops about one radius short of the object's end.
    """
    deg = w.degree()
    for e in range(len(w.u)):
        p = w.pts[e]
        if len(p) < 2 or w.u[e] == w.v[e]:
            continue
        for end in (0, 1):
            node = w.v[e] if end else w.u[e]
            if deg[node] != 1:
                continue
            seq = p if end else p[::-1]
            k = min(3, len(seq) - 1)
            direction = seq[-1] - seq[-1 - k]
            norm = np.linalg.norm(direction)
            if norm == 0:
                continue
            tip = seq[-1] + direction / norm * w.node_r[node]
            w.node_pos[node] = tip
            if end:
                p = np.vstack([p, tip])
                w.rad[e] = np.append(w.rad[e], w.node_r[node])
            else:
                p = np.vstack([tip, p])
                w.rad[e] = np.insert(w.rad[e], 0, w.node_r[node])
        w.pts[e] = p


def _drop_spurious_loops(w, euler, cavities):
    """Remove the loops the voxel graph has beyond the skeleton's true count.

    Thinning preserves the Euler characteristic chi = b0 - b1 + b2, so the
    number of independent loops is components + cavities - chi
    (``cavities`` is called only when the graph has too many loops).  A
    few voxel configurations around thick junctions still close tiny cycles
    in the graph that enclose no background; the excess is removed as the
    shortest edges that lie on a short cycle.
    """
    n = len(w.node_pos)
    u, v = np.asarray(w.u, np.int64), np.asarray(w.v, np.int64)
    if len(u) == 0:
        return 0
    ncomp, _ = _components(n, np.column_stack([u, v]))
    excess = (len(u) - n + ncomp) - (ncomp - euler)
    if excess > 0:
        excess -= cavities()
    if excess <= 0:
        return 0
    length = w.raw_lengths()
    adj = {}
    for e, (a, b) in enumerate(zip(u.tolist(), v.tolist())):
        adj.setdefault(a, set()).add(e)
        adj.setdefault(b, set()).add(e)

    def on_short_cycle(e, hops=4):
        """Is there another path from u[e] to v[e] within ``hops`` edges?"""
        a, b = int(u[e]), int(v[e])
        if a == b:
            return True
        frontier, seen = {a}, {a}
        for _ in range(hops):
            nxt = set()
            for x in frontier:
                for f in adj[x]:
                    if f == e:
                        continue
                    y = int(v[f]) if int(u[f]) == x else int(u[f])
                    if y == b:
                        return True
                    if y not in seen:
                        seen.add(y)
                        nxt.add(y)
            frontier = nxt
        return False

    # Candidates: edges shorter than the circumference at their ends (a loop
    # that short cannot go round a hole of the structure; common practice).
    cand = np.flatnonzero(length <= 2 * np.pi * np.maximum(w.node_r[u], w.node_r[v]))
    drop = []
    for e in cand[np.argsort(length[cand], kind="stable")]:  # shortest first
        if len(drop) == excess:
            break
        if on_short_cycle(e):
            drop.append(e)
            adj[int(u[e])].discard(e)
            adj[int(v[e])].discard(e)
    w.keep_edges(np.setdiff1d(np.arange(len(u)), drop))
    return len(drop)


def _finish(w, spacing, unit, shape, smoothing, meta, mask=None):
    """Drop nodes left without edges, flatten polylines, smooth them, measure lengths."""
    alive = (w.degree() > 0) | w.protected
    new_id = np.cumsum(alive) - 1
    u = new_id[np.asarray(w.u, np.int64)] if w.u else np.zeros(0, np.int64)
    v = new_id[np.asarray(w.v, np.int64)] if w.v else np.zeros(0, np.int64)
    nodes = w.node_pos[alive]
    node_r = w.node_r[alive]
    ndim = len(spacing)
    counts = np.array([len(p) for p in w.pts], np.int64)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    points = np.concatenate(w.pts) if w.pts else np.zeros((0, ndim))
    radius = np.concatenate(w.rad) if w.rad else np.zeros(0)
    edges = np.column_stack([u, v]).astype(np.int64) if len(u) else np.zeros((0, 2), np.int64)
    degree = np.bincount(edges.ravel(), minlength=len(nodes)).astype(np.int64)
    # A ring anchor (one self-loop, nothing else) smooths as a closed curve.
    closed = (u == v) & (degree[u] == 2) if len(u) else np.zeros(0, bool)
    # Smoothing works in points, i.e. about voxels of the finest axis.
    raw_points = points
    points = smooth_polylines(points, offsets, smoothing, closed=closed)
    edge_radius = None
    if mask is not None:
        # Leave out twice the node radius at junctions (where daughters still
        # overlap each other and the parent), once at tips.
        reach = node_r * np.where(degree >= 3, 2.0, 1.0)
        edge_radius = equivalent_radius(mask, spacing, raw_points, points, offsets,
                                        np.column_stack([reach[u], reach[v]]) if len(u)
                                        else np.zeros((0, 2)))
    if closed.any():
        nodes = nodes.copy()
        nodes[u[closed]] = points[offsets[:-1][closed]]
    length = polyline_lengths(points, offsets)
    return SkeletonGraph(nodes=nodes, node_radius=node_r, node_degree=degree, edges=edges,
                         points=points, point_radius=radius, offsets=offsets, edge_length=length,
                         spacing=tuple(spacing), unit=unit, shape=tuple(shape), meta=meta,
                         edge_radius=edge_radius)


# ----------------------------------------------------------------------------- public API

def graph_from_skeleton(skel, mask, spacing=None, *, unit="um", prune=True, prune_factor=1.5,
                        min_branch_length=0.0, merge_junctions=True, extend_tips=False,
                        smoothing=2.0, radius_method="shells", timings=None, meta=None,
                        dist_sq=None):
    """Build the graph of an already thinned mask.  See :func:`skeleton_graph`.

    ``dist_sq``, when given, is the mask's squared distance map
    (:func:`skelmorph.thinning.distance_map_sq`); centreline radii are then
    read from it instead of searched for.
    """
    spacing = validate_spacing(1.0 if spacing is None else spacing, mask.ndim)
    skel = np.asarray(skel, bool)
    mask = np.asarray(mask, bool)
    if skel.shape != mask.shape:
        raise InputError(f"skeleton shape {skel.shape} differs from mask shape {mask.shape}")
    w = _raw_graph(skel, mask, spacing, radius_method, timings, dist_sq)
    with _timed(timings, "topology"):
        _drop_spurious_loops(w, euler_characteristic(np.argwhere(skel), skel.shape),
                             lambda: count_cavities(mask))
    with _timed(timings, "graph"):
        for _ in range(100):  # each pass removes something; stable after a few
            changed = False
            if merge_junctions:
                changed |= _merge_close_junctions(w)
            if prune:
                changed |= _prune_spurs(w, prune_factor, min_branch_length)
            changed |= _dissolve_degree_two(w)
            if not changed:
                break
        if extend_tips:
            _extend_tips(w)
        meta = dict(meta or {})
        meta.update(prune=bool(prune), prune_factor=float(prune_factor),
                    min_branch_length=float(min_branch_length), merge_junctions=bool(merge_junctions),
                    tip_extension=bool(extend_tips), smoothing=float(smoothing),
                    skelmorph_version=__version__)
        return _finish(w, spacing, normalise_unit(unit), mask.shape, smoothing, meta, mask)


def skeleton_graph(mask, spacing=None, prune=True, *, unit="um", prune_factor=1.5,
                   min_branch_length=0.0, merge_junctions=True, extend_tips=False,
                   smoothing=2.0, isotropic=False, method="ordered", timings=None):
    """Centreline graph of a binary 2D or 3D mask.

    Parameters
    ----------
    mask : ndarray
        Binary image (bool, or two values; the larger is the structure).
        Use :func:`skelmorph.to_mask` for grey images.
    spacing : float or sequence of float, optional
        Voxel size, ``(z, y, x)`` order, in ``unit``.  Default 1.
    prune : bool
        Remove spurs: terminal branches no longer than
        ``max(prune_factor x radius at their junction, min_branch_length)``,
        repeated until stable.  Pruning never breaks a loop or disconnects a
        component.
    unit : str
        Length unit of ``spacing``.
    prune_factor : float
        See ``prune``; 1.5 by default (a bump of height h on a tube of radius
        r thins to a spur of length about h; common practice).
    min_branch_length : float
        Absolute spur length limit, in ``unit``.
    merge_junctions : bool
        Contract branches joining two junctions closer than the sum of their
        radii, so that two crossing veins give one node, not two.
    extend_tips : bool
        Lengthen terminal branches by the radius at their tip (thinning stops
        about one radius short of the object's end).  Off by default:
        ``total_length`` is then the length of the thinned centreline.
    smoothing : float
        Gaussian smoothing of the polylines before lengths are measured, in
        voxels (0 = raw voxel steps, which over-estimate length by 5-13 %).
    isotropic : bool
        Resample the mask to cubic voxels before thinning.  Off by default:
        the thinning works on the anisotropic grid, and resampling can cut
        diagonal links (it is kept for comparisons with scikit-image's
        thinning, which assumes cubic voxels).  Recorded in ``meta``.
    method : {"ordered", "lee", "zhang"}
        Thinning: our distance-ordered thinning (default) or scikit-image's
        (see :func:`skelmorph.skeleton.skeletonize`).
    timings : dict, optional
        Filled with seconds spent per stage (``resample``, ``skeletonize``,
        ``restore``, ``graph``, ``radii``, ``topology``).

    Returns
    -------
    SkeletonGraph

    Raises
    ------
    InputError
        A mask that is not binary, empty, all foreground, of the wrong
        dimensionality or has NaN values, or an unknown thinning method.
    SpacingError
        A bad voxel size.

    Examples
    --------
    >>> import numpy as np
    >>> ring = np.zeros((40, 40), bool)
    >>> yy, xx = np.mgrid[:40, :40]
    >>> ring[(np.hypot(yy - 20, xx - 20) < 15) & (np.hypot(yy - 20, xx - 20) > 9)] = True
    >>> skeleton_graph(ring).cycle_rank
    1

    Examples
    --------
    >>> import numpy as np
    >>> mask = np.zeros((5, 40, 40), bool)
    >>> mask[2, 20, 5:35] = True          # a bar ...
    >>> mask[2, 5:20, 20] = True          # ... and a stroke meeting it: a T
    >>> g = skeleton_graph(mask, spacing=(1.0, 1.0, 1.0))
    >>> g.n_nodes, g.n_edges, g.cycle_rank
    (4, 3, 0)
    """
    from .skeleton import THINNING_METHODS

    mask = check_image_array(mask)
    if not is_binary(mask):
        raise InputError("skeleton_graph needs a binary mask; threshold grey images first "
                         "(skelmorph.to_mask)")
    mask = check_mask(as_bool_mask(mask))
    spacing = validate_spacing(1.0 if spacing is None else spacing, mask.ndim)
    method = method or "ordered"
    if method not in THINNING_METHODS:
        raise InputError(f"unknown thinning method {method!r}; use one of "
                         f"{', '.join(THINNING_METHODS)}")
    source_spacing, source_shape = spacing, mask.shape
    # Work in units of the finest voxel side and scale back at the end, so
    # results are equivariant under a change of unit (1e-12 or 1e6 per voxel).
    scale = min(spacing)
    spacing = tuple(s / scale for s in spacing)
    min_branch_length = min_branch_length / scale
    resampled = False
    if isotropic and max(spacing) > min(spacing):
        with _timed(timings, "resample"):
            mask, spacing = resample_isotropic(mask, spacing)
        resampled = True
        check_mask(mask)
    dist_sq = None
    with _timed(timings, "skeletonize"):
        if method == "ordered":
            from .thinning import distance_map_sq, thin
            dist_sq = distance_map_sq(mask, spacing)
            skel = thin(mask, spacing, dsq=dist_sq)
        else:
            skel = skeletonize(mask, method=method)
    if method != "ordered":  # ours never erases a component
        with _timed(timings, "restore"):
            skel = _restore_vanished(mask, skel)
    graph = graph_from_skeleton(skel, mask, spacing, unit=unit, prune=prune,
                                prune_factor=prune_factor, min_branch_length=min_branch_length,
                                merge_junctions=merge_junctions, extend_tips=extend_tips,
                                smoothing=smoothing, timings=timings, dist_sq=dist_sq,
                                meta={"resampled_isotropic": resampled,
                                      "thinning_spacing": [x * scale for x in spacing],
                                      "thinning": method})
    # Report the source image's voxel size and shape, not the resampled ones.
    return dataclasses.replace(
        graph, spacing=source_spacing, shape=tuple(source_shape),
        nodes=graph.nodes * scale, node_radius=graph.node_radius * scale,
        points=graph.points * scale, point_radius=graph.point_radius * scale,
        edge_length=graph.edge_length * scale,
        edge_radius=None if graph.edge_radius is None else graph.edge_radius * scale)
