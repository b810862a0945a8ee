"""The raw graph of a skeleton: junction clusters become nodes, chains of
path voxels become branch polylines with radii (:class:`Work` holds it,
editable, for the clean-up passes of :mod:`skelmorph.cleanup`)."""

from __future__ import annotations

import time
from contextlib import contextmanager

import numpy as np
from scipy import ndimage as ndi
from scipy import sparse
from numba import njit
from scipy.sparse import csgraph

from ._kernels import branch_voxel_paths, walk_paths
from .polyline import polyline_lengths

from .centreline_radius import centreline_radius
from .voxels import euler_characteristic, small_cycle_voxels, voxel_links


@contextmanager
def _timed(timings, name):
    t0 = time.perf_counter()
    yield
    if timings is not None:
        timings[name] = timings.get(name, 0.0) + time.perf_counter() - t0


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


@njit(cache=True, nogil=True)
def _copy_blocks(flat, offsets, blocks, out, starts):
    """out[starts[i]:...] = flat[offsets[b]:offsets[b + 1]] for b = blocks[i]."""
    for i in range(blocks.size):
        b = blocks[i]
        k = starts[i]
        for j in range(offsets[b], offsets[b + 1]):
            out[k] = flat[j]
            k += 1


class EdgeArrays:
    """Per-edge arrays (points or radii) used as a list by the clean-up.

    The raw graph's branches are views cut on demand from one flat array
    (``flat[offsets[b]:offsets[b + 1]]``); branches the clean-up makes or
    changes are kept as arrays of their own.  A foam has millions of
    branches, most never edited: one view object per branch and per array
    cost about 50 bytes per centreline voxel more than the points themselves.
    """

    def __init__(self, flat, offsets, own=()):
        self.flat = flat
        self.offsets = np.asarray(offsets, np.int64)
        self.own = list(own)
        n = len(self.offsets) - 1
        # slot >= 0: a block of ``flat``; slot < 0: own[-slot - 1].
        self._slot = np.concatenate([np.arange(n, dtype=np.int64),
                                     -1 - np.arange(len(self.own), dtype=np.int64)])
        self._n = len(self._slot)

    def __len__(self):
        return self._n

    def __getitem__(self, e):
        if not -self._n <= e < self._n:
            raise IndexError(e)
        s = int(self._slot[e])
        if s >= 0:
            return self.flat[self.offsets[s]:self.offsets[s + 1]]
        return self.own[-s - 1]

    def __setitem__(self, e, array):
        if not -self._n <= e < self._n:
            raise IndexError(e)
        self.own.append(array)
        self._slot[e] = -len(self.own)

    def __iter__(self):
        return (self[e] for e in range(self._n))

    def append(self, array):
        if self._n == len(self._slot):  # grow by doubling: appends are amortised O(1)
            self._slot = np.concatenate([self._slot, np.zeros(max(self._n, 16), np.int64)])
        self.own.append(array)
        self._slot[self._n] = -len(self.own)
        self._n += 1

    def take(self, keep):
        """The arrays of edges ``keep`` (in that order); own arrays of dropped
        edges are let go."""
        slot = self._slot[:self._n][np.asarray(keep, np.int64)]
        out = EdgeArrays(self.flat, self.offsets)
        mine = np.flatnonzero(slot < 0)
        out.own = [self.own[-int(s) - 1] for s in slot[mine]]
        slot[mine] = -1 - np.arange(len(mine))
        out._slot, out._n = slot, len(slot)
        return out

    def lengths(self):
        """Number of rows of every edge's array."""
        slot = self._slot[:self._n]
        out = np.empty(self._n, np.int64)
        flat = slot >= 0
        out[flat] = self.offsets[slot[flat] + 1] - self.offsets[slot[flat]]
        out[~flat] = [len(self.own[-int(s) - 1]) for s in slot[~flat]]
        return out

    def concatenate(self, empty):
        """All edges' arrays end to end (``empty`` when there are none)."""
        if self._n == 0:
            return empty
        counts = self.lengths()
        starts = np.concatenate([[0], np.cumsum(counts)])
        out = np.empty((int(starts[-1]),) + self.flat.shape[1:], self.flat.dtype)
        slot = self._slot[:self._n]
        flat = slot >= 0
        _copy_blocks(self.flat, self.offsets, slot[flat], out, starts[:-1][flat])
        for e in np.flatnonzero(~flat).tolist():
            out[starts[e]:starts[e + 1]] = self.own[-int(slot[e]) - 1]
        return out


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
        self.pts = self.pts.take(keep)
        self.rad = self.rad.take(keep)

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
        if not len(self.pts):
            return np.zeros(0)
        offsets = np.concatenate([[0], np.cumsum(self.pts.lengths())])
        return polyline_lengths(self.pts.concatenate(None), offsets)


def _centreline_voxels(skel, mask, spacing, radius_method, timings, dist_sq=None):
    """Centreline voxel indices (C order) and their distances to the background."""
    with _timed(timings, "graph"):
        coords = np.argwhere(skel)
    with _timed(timings, "radii"):
        if dist_sq is not None:
            vox_r = np.sqrt(dist_sq[tuple(coords.T)].astype(np.float64))
        else:
            vox_r = centreline_radius(mask, coords, spacing, method=radius_method)
    return coords, vox_r


def _raw_graph_of_voxels(coords, shape, spacing, vox_r, timings):
    """Nodes and point-ordered edges of centreline voxels ``coords`` (C order)
    with radii ``vox_r``, in an array of ``shape``."""
    sp = np.asarray(spacing, float)
    with _timed(timings, "graph"):
        n = len(coords)
        links = voxel_links(coords, shape)
        deg = np.bincount(links.ravel(), minlength=n)
        clique = small_cycle_voxels(coords, links, shape)
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
        del lab, touches  # components are found again below, after the ring anchors

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
        del key, uniq, jlab
        # Positions are made for the voxels that need them (coords * spacing,
        # element for element), not for all: 24 bytes per voxel less.
        node_vox_pos = coords[node_vox] * sp
        # A node sits on the voxel of its cluster nearest the cluster's centroid;
        # branch ends reach it through the cluster's voxels (no straight jumps).
        centroid = np.zeros((n_nodes, coords.shape[1]))
        np.add.at(centroid, node_id_of, node_vox_pos)
        centroid /= np.bincount(node_id_of, minlength=n_nodes)[:, None]
        gap = ((node_vox_pos - centroid[node_id_of]) ** 2).sum(axis=1)
        del node_vox_pos, centroid
        pick = np.lexsort((node_vox, gap, node_id_of))
        first_of = np.unique(node_id_of[pick], return_index=True)[1]
        centre_vox = node_vox[pick[first_of]]
        node_pos = coords[centre_vox] * sp
        pred = _cluster_predecessors(n, jlinks, centre_vox[junction[centre_vox]], coords, sp)
        node_r = np.zeros(n_nodes)
        np.maximum.at(node_r, node_id_of, vox_r[node_vox])
        protected = np.zeros(n_nodes, bool)
        protected[node_of_voxel[node_vox[deg[node_vox] == 0]]] = True
        del deg
        loops_u, loops_pts, loops_rad = _cluster_tunnels(
            coords, junction, node_of_voxel, links, sp, vox_r, node_pos, node_r, shape)

        # Path voxels: order every branch with one depth-first traversal.
        slab = np.flatnonzero(~is_node)
        u_list, v_list = [], []
        if len(slab):
            ncomp, lab = _components(n, path_links)
            ends = slab[slab_deg[slab] < 2]
            del slab, slab_deg
            _, first = np.unique(lab[ends], return_index=True)
            starts = np.sort(ends[first])
            both = np.concatenate([path_links, path_links[:, ::-1]])
            both = both[np.lexsort((both[:, 1], both[:, 0]))]
            link_start = np.searchsorted(both[:, 0], np.arange(n + 1))
            order = walk_paths(n, link_start, both[:, 1], starts)
            del both, link_start  # large temporaries go as soon as they are used
            olab = lab[order]
            cut = np.flatnonzero(np.diff(olab)) + 1
            bounds = np.concatenate([[0], cut, [len(order)]])
            del olab, cut, lab
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
            del first_att, last_att, nl, sv, nv, srt
        else:
            order, bounds = np.zeros(0, np.int64), np.zeros(1, np.int64)
            fa = la = np.zeros(0, np.int64)
        # Direct node-node links (e.g. a one-voxel spur on a junction): a
        # branch without path voxels, one per pair of nodes.
        nn = links[is_node[links[:, 0]] & is_node[links[:, 1]]]
        a, b = node_of_voxel[nn[:, 0]], node_of_voxel[nn[:, 1]]
        diff = np.flatnonzero(a != b)
        del links, path_links
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
            del order, pred, node_of_voxel  # voxel-sized arrays go before the points come
            flat = coords[vox_idx] * sp
            flat_r = vox_r[vox_idx]
            del vox_idx
            flat_r[offs[:-1]], flat_r[offs[1:] - 1] = node_r[eu], node_r[ev]
            u_list, v_list = eu.tolist(), ev.tolist()
        else:
            flat, flat_r = np.zeros((0, coords.shape[1])), np.zeros(0)
            offs = np.zeros(1, np.int64)
        u_list, v_list = list(u_list) + loops_u, list(v_list) + loops_u
        pts = EdgeArrays(flat, offs, loops_pts)
        rad = EdgeArrays(flat_r, offs, loops_rad)
    return _Work(node_pos, node_r, protected, u_list, v_list, pts, rad, shape, spacing)


def _cluster_predecessors(n, jlinks, sources, coords, sp):
    """Shortest-path predecessors inside junction clusters, towards each
    cluster's node voxel (``sources``); -1 at node voxels and elsewhere."""
    pred = np.full(n, -1, np.int64)
    if len(jlinks) == 0 or len(sources) == 0:
        return pred
    w = np.linalg.norm(coords[jlinks[:, 0]] * sp - coords[jlinks[:, 1]] * sp, axis=1)
    g = sparse.coo_matrix((w, (jlinks[:, 0], jlinks[:, 1])), shape=(n, n)).tocsr()
    _, p, _ = csgraph.dijkstra(g, directed=False, indices=sources, min_only=True,
                            return_predecessors=True)
    return np.where(p >= 0, p, -1).astype(np.int64)


def _cluster_tunnels(coords, junction, node_of_voxel, links, sp, vox_r, node_pos, node_r,
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
            loops_pts.append(np.vstack([node_pos[nd], coords[cycle] * sp, node_pos[nd]]))
            loops_rad.append(np.concatenate([[node_r[nd]], vox_r[cycle], [node_r[nd]]]))
    return loops_u, loops_pts, loops_rad


def _components(n, links):
    if len(links) == 0:
        return n, np.arange(n)
    g = sparse.coo_matrix((np.ones(len(links)), (links[:, 0], links[:, 1])), shape=(n, n))
    return csgraph.connected_components(g, directed=False)
