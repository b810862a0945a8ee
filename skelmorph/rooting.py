"""Roots and spanning trees for skeleton graphs with loops.

Tree descriptors need a rooted tree, but skeletons of bone, vessel beds and
leaves are full of loops.  :func:`choose_root` picks a root by a stated rule
and :func:`spanning_trees` keeps one spanning tree of the root's component;
every branch left out of the tree is cut in two (so total length is kept and
each cut leaves two tips) or dropped.
"""

from __future__ import annotations

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph
from scipy.sparse.linalg import splu

from .errors import InputError
from .tree import Tree

__all__ = ["choose_root", "spanning_trees", "ROOT_METHODS", "TREE_METHODS",
           "count_spanning_trees"]

ROOT_METHODS = ("thickest", "centroid", "center", "point", "face")
TREE_METHODS = ("shortest", "minimum", "widest", "random")


# --------------------------------------------------------------------- roots
def _pick(candidates, score, coords):
    """Candidate with the smallest score; exact ties go to the lexicographically
    smallest position, so the choice never depends on node numbering."""
    score = np.asarray(score, float)
    keys = [coords[candidates, k] for k in range(coords.shape[1] - 1, -1, -1)]
    best = np.lexsort(keys + [score])[0]
    return int(candidates[best])


def _component_nodes(graph, which):
    labels = graph.component_labels()
    if which == "all":
        return [np.flatnonzero(labels == c) for c in range(graph.n_components)]
    if which != "largest":
        raise InputError(f"components must be 'largest' or 'all', not {which!r}")
    length = np.bincount(labels[graph.edges[:, 0]], graph.edge_length, graph.n_components)
    size = np.bincount(labels, minlength=graph.n_components)
    best = np.lexsort((-size, -length))[0]
    return [np.flatnonzero(labels == best)]


def _length_adjacency(graph, nodes=None):
    """Sparse symmetric adjacency with the shortest parallel-edge length as weight."""
    n = graph.n_nodes
    u, v = graph.edges[:, 0], graph.edges[:, 1]
    keep = u != v
    if nodes is not None:
        inside = np.zeros(n, bool)
        inside[nodes] = True
        keep &= inside[u]
    # csgraph ignores zero weights, so give zero-length edges a negligible length.
    tiny = 1e-12 * max(float(graph.edge_length.max(initial=0.0)), 1.0)
    w = np.maximum(graph.edge_length[keep], tiny)
    a, b = np.minimum(u, v)[keep], np.maximum(u, v)[keep]
    order = np.lexsort((w, b, a))
    a, b, w = a[order], b[order], w[order]
    first = np.ones(len(a), bool)
    first[1:] = (a[1:] != a[:-1]) | (b[1:] != b[:-1])
    a, b, w = a[first], b[first], w[first]
    return sparse.csr_matrix((np.concatenate([w, w]), (np.concatenate([a, b]), np.concatenate([b, a]))),
                             shape=(n, n))


def _weighted_center(graph, nodes):
    """Node of least eccentricity (by length) in one component, exactly.

    Uses eccentricity bounds from a few single-source sweeps (Takes & Kosters
    2011, Algorithms 4:100): after a sweep from u, every node w has
    ecc(w) >= max(d(u,w), ecc(u) - d(u,w)).  Sweeps continue from the node
    with the smallest lower bound until no unswept node can beat the best
    eccentricity found.
    """
    if len(nodes) == 1:
        return int(nodes[0])
    adj = _length_adjacency(graph, nodes)[nodes][:, nodes]
    m = len(nodes)
    lower = np.zeros(m)
    done = np.zeros(m, bool)
    ecc = np.full(m, np.inf)
    u = 0
    for _ in range(m):
        d = csgraph.dijkstra(adj, directed=False, indices=u)
        e = d.max()
        ecc[u] = e
        done[u] = True
        lower = np.maximum(lower, np.maximum(d, e - d))
        lower[u] = e
        # Nodes that could still beat the best certified eccentricity.
        open_ = ~done & (lower < ecc[done].min())
        if not open_.any():
            break
        u = int(np.flatnonzero(open_)[np.argmin(lower[open_])])
    best = np.min(ecc[done])
    tied = nodes[done & (ecc == best)]
    return _pick(tied, np.zeros(len(tied)), graph.nodes)


def _face_distance(graph, face):
    axes = "zyx"[-graph.ndim:]
    if not (isinstance(face, str) and len(face) == 2 and face[0] in axes and face[1] in "-+"):
        raise InputError(f"face must look like 'z-' or 'x+' (axis {', '.join(axes)} and - for the "
                         f"low face, + for the high face), not {face!r}")
    k = axes.index(face[0])
    c = graph.nodes[:, k]
    if face[1] == "-":
        return c
    if not graph.shape:
        return c.max() - c
    return (graph.shape[k] - 1) * graph.spacing[k] - c


def choose_root(graph, method="thickest", *, point=None, face=None, components="largest"):
    """Choose a root node by a stated rule.

    Parameters
    ----------
    graph : SkeletonGraph
    method : {'thickest', 'centroid', 'center', 'point', 'face'}
        ``thickest``: the node of largest radius (vessel inlets, leaf bases).
        ``centroid``: the node nearest the length-weighted centroid of the
        centreline.  ``center``: the graph centre, least eccentricity with
        edge length as distance.  ``point``: the node nearest ``point``
        (physical coordinates, numpy axis order).  ``face``: the tip nearest the
        image face ``face`` (``'z-'`` is the face at z = 0, ``'x+'`` the far x
        face; any node when the component has no tip), thickest first on ties.
    components : {'largest', 'all'}
        Root only the largest component (by centreline length), or one root
        per component.

    Returns
    -------
    int or (C,) int array
        A node index for ``components='largest'``; one per component
        (component order of :meth:`SkeletonGraph.component_labels`) for 'all'.

    Notes
    -----
    Exact ties are broken by node position, never by node numbering.  No
    single published standard fixes the root of a cyclic network; these rules
    follow common practice (inlet for vessels, base for leaves; several roots
    for bone, see :func:`spanning_trees`).

    Examples
    --------
    >>> import numpy as np
    >>> from skelmorph import skeleton_graph
    >>> mask = np.zeros((5, 40, 40), bool)
    >>> mask[2, 20, 5:35] = True
    >>> mask[2, 5:20, 20] = True
    >>> g = skeleton_graph(mask, spacing=(1.0, 1.0, 1.0))
    >>> int(g.node_degree[choose_root(g, "centroid")])   # the junction of the T
    3
    """
    if graph.n_nodes == 0:
        raise InputError("the graph has no nodes; nothing to root")
    if method not in ROOT_METHODS:
        raise InputError(f"unknown root method {method!r}; choose one of {', '.join(ROOT_METHODS)}")
    comps = _component_nodes(graph, components)
    xyz = graph.nodes
    roots = []
    for nodes in comps:
        if method == "thickest":
            r = _pick(nodes, -graph.node_radius[nodes], xyz)
        elif method == "centroid":
            lab = np.zeros(graph.n_nodes, bool)
            lab[nodes] = True
            from .polyline import edge_index
            eid = edge_index(graph.offsets)
            inside = lab[graph.edges[eid, 0]]
            pts = graph.points
            if inside.sum() > 1:
                seg = np.linalg.norm(np.diff(pts, axis=0), axis=1)
                same = (eid[1:] == eid[:-1]) & inside[1:]
                mid = 0.5 * (pts[1:] + pts[:-1])
                w = np.where(same, seg, 0.0)
                c = (mid * w[:, None]).sum(0) / w.sum() if w.sum() > 0 else xyz[nodes].mean(0)
            else:
                c = xyz[nodes].mean(0)
            r = _pick(nodes, np.linalg.norm(xyz[nodes] - c, axis=1), xyz)
        elif method == "center":
            r = _weighted_center(graph, nodes)
        elif method == "point":
            if point is None:
                raise InputError("method 'point' needs point=(z, y, x) in physical units")
            p = np.asarray(point, float).reshape(-1)
            if len(p) != graph.ndim or not np.all(np.isfinite(p)):
                raise InputError(f"point must have {graph.ndim} finite coordinates, got {point!r}")
            r = _pick(nodes, np.linalg.norm(xyz[nodes] - p, axis=1), xyz)
        else:
            if face is None:
                raise InputError("method 'face' needs face='z-', 'x+', ...")
            dist = _face_distance(graph, face)
            cand = nodes[graph.node_degree[nodes] == 1]
            if len(cand) == 0:
                cand = nodes
            best = dist[cand].min()
            near = cand[np.isclose(dist[cand], best, rtol=0, atol=1e-9 * max(1.0, abs(best)))]
            r = _pick(near, -graph.node_radius[near], xyz)
        roots.append(r)
    return roots[0] if components == "largest" else np.array(roots, dtype=np.int64)


# ------------------------------------------------------------ spanning trees
#: Largest component (after dropping hanging trees) whose spanning trees are
#: counted by default: an exact determinant of a 3D mesh Laplacian costs about
#: n^2 (about 3 s at this size on 2 cores, 35 s at three times it).
SPANNING_TREE_COUNT_LIMIT = 60_000


def count_spanning_trees(graph, log=True, max_nodes=None):
    """Number of spanning trees of each component, by the matrix-tree theorem.

    Kirchhoff (1847): tau = det of the Laplacian with one row and column
    removed; parallel edges count separately, self-loops never.  Returns
    log(tau) summed over components when ``log`` (the count overflows quickly
    on real networks), else tau as a float.

    Hanging trees are dropped first (a leaf and its edge are in every spanning
    tree, so they do not change the count), and the reduced Laplacian, which
    is symmetric positive definite, is factored without pivoting in a
    symmetric minimum-degree order.  The cost still grows about as n^2 on 3D
    networks; a component larger than ``max_nodes`` after the reduction
    (default :data:`SPANNING_TREE_COUNT_LIMIT`) gives NaN.
    """
    limit = SPANNING_TREE_COUNT_LIMIT if max_nodes is None else max_nodes
    n = graph.n_nodes
    u, v = graph.edges[:, 0], graph.edges[:, 1]
    keep = u != v
    u, v = u[keep], v[keep]
    # Peel leaves until none is left (the 2-core, plus isolated trees' roots).
    alive = np.ones(len(u), bool)
    while True:
        deg = np.bincount(u[alive], minlength=n) + np.bincount(v[alive], minlength=n)
        leaf = deg == 1
        drop = alive & (leaf[u] | leaf[v])
        if not drop.any():
            break
        alive &= ~drop
    u, v = u[alive], v[alive]
    a = sparse.coo_matrix((np.ones(len(u)), (u, v)), shape=(n, n))
    a = (a + a.T).tocsr()
    lap = (sparse.diags(np.asarray(a.sum(1)).ravel()) - a).tocsc()
    used = np.zeros(n, bool)
    used[u] = used[v] = True
    _, labels = csgraph.connected_components(a, directed=False)
    total = 0.0
    for c in np.unique(labels[used]):
        idx = np.flatnonzero((labels == c) & used)
        if len(idx) < 2:
            continue
        if len(idx) - 1 > limit:
            return float("nan")
        # log det = sum of log U_ii (positive definite: no pivoting needed).
        sub = lap[idx][:, idx][1:, 1:].tocsc()
        lu = splu(sub, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                  options=dict(SymmetricMode=True))
        total += float(np.log(np.abs(lu.U.diagonal())).sum())
    return total if log else float(np.exp(total))


def _tree_edges(graph, root, nodes, method, seed):
    """Parent node and parent edge of every node of the root's component."""
    n = graph.n_nodes
    u, v = graph.edges[:, 0], graph.edges[:, 1]
    inside = np.zeros(n, bool)
    inside[nodes] = True
    comp_edges = np.flatnonzero(inside[u] & (u != v))
    parent_edge = np.full(n, -1, np.int64)
    if method == "shortest":
        adj = _length_adjacency(graph, nodes)
        _, pred = csgraph.dijkstra(adj, directed=False, indices=root, return_predecessors=True)
        # Among parallel edges joining a node to its predecessor, take the shortest.
        cand = comp_edges
        a, b = u[cand], v[cand]
        child = np.where(pred[b] == a, b, np.where(pred[a] == b, a, -1))
        ok = child >= 0
        cand, child = cand[ok], child[ok]
        order = np.lexsort((graph.edge_length[cand], child))
        cand, child = cand[order], child[order]
        first = np.ones(len(child), bool)
        first[1:] = child[1:] != child[:-1]
        parent_edge[child[first]] = cand[first]
    elif method in ("minimum", "widest"):
        from ._kernels import kruskal
        if method == "minimum":
            w = graph.edge_length[comp_edges]
        else:
            mean_r, _, _ = graph.edge_radius_stats()
            w = -mean_r[comp_edges]
        # Ties go to the edge whose midpoint comes first in position order.
        mid = graph.points[(graph.offsets[comp_edges] + graph.offsets[comp_edges + 1] - 1) // 2]
        keys = [mid[:, k] for k in range(graph.ndim - 1, -1, -1)]
        scan = comp_edges[np.lexsort(keys + [w])]
        keep = kruskal(n, u, v, scan)
        chosen = np.flatnonzero(keep)
        # Orient the chosen edges away from the root.
        t = sparse.coo_matrix((np.ones(len(chosen)), (u[chosen], v[chosen])), shape=(n, n))
        order, pred = csgraph.breadth_first_order(t, root, directed=False)
        a, b = u[chosen], v[chosen]
        child = np.where(pred[b] == a, b, a)
        parent_edge[child] = chosen
    elif method == "random":
        from ._kernels import wilson_tree
        ends = np.concatenate([u[comp_edges], v[comp_edges]])
        other = np.concatenate([v[comp_edges], u[comp_edges]])
        eids = np.concatenate([comp_edges, comp_edges])
        order = np.argsort(ends, kind="stable")
        start = np.concatenate([[0], np.cumsum(np.bincount(ends, minlength=n))])
        parent_edge = wilson_tree(n, start, other[order], eids[order], root, inside, seed)
    else:
        raise InputError(f"unknown tree method {method!r}; choose one of {', '.join(TREE_METHODS)}")
    parent_node = np.full(n, -1, np.int64)
    has = parent_edge >= 0
    pe = parent_edge[has]
    idx = np.flatnonzero(has)
    parent_node[idx] = np.where(u[pe] == idx, v[pe], u[pe])
    return parent_node, parent_edge


def _chain_parents(counts, anchors, base):
    """Parents of points laid out chain after chain from index ``base``.

    Chain j has counts[j] points; its first point hangs from anchors[j] and
    each later one from the previous.  Returns the parents and the last point
    of every chain (its anchor when the chain is empty).
    """
    total = int(counts.sum())
    ids = base + np.arange(total)
    parents = ids - 1
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
    nonempty = counts > 0
    parents[starts[nonempty]] = anchors[nonempty]
    last = np.where(nonempty, base + starts + counts - 1, anchors)
    return parents, last


def _build_tree(graph, root, nodes, parent_node, parent_edge, cut, method, dist=None):
    """Point-level Tree from a node-level spanning tree of one component."""
    n = graph.n_nodes
    u, v = graph.edges[:, 0], graph.edges[:, 1]
    off = graph.offsets
    local = np.full(n, -1, np.int64)
    local[nodes] = np.arange(len(nodes))
    coords = [graph.nodes[nodes]]
    radius = [graph.node_radius[nodes]]
    parent = np.full(len(nodes), -1, np.int64)
    base = len(nodes)
    parents = [parent]

    # Tree edges: interior points from the parent node towards the child node.
    child = np.flatnonzero(parent_edge >= 0)
    te = parent_edge[child]
    flip = u[te] != parent_node[child]
    counts = off[te + 1] - off[te] - 2
    counts = np.maximum(counts, 0)
    j = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    s0 = np.repeat(off[te] + 1, counts)
    s1 = np.repeat(off[te + 1] - 2, counts)
    src = np.where(np.repeat(flip, counts), s1 - j, s0 + j)
    p, last = _chain_parents(counts, local[parent_node[child]], base)
    parents.append(p)
    coords.append(graph.points[src])
    radius.append(graph.point_radius[src])
    parent[local[child]] = last
    base += len(src)

    # Branches left out of the tree: cut in two, or dropped.
    inside = np.zeros(n, bool)
    inside[nodes] = True
    in_tree = np.zeros(graph.n_edges, bool)
    in_tree[te] = True
    out = np.flatnonzero(inside[u] & ~in_tree)
    n_cut = 0
    if cut == "split" and len(out):
        from .polyline import cumulative_arclength
        s = cumulative_arclength(graph.points, graph.offsets)
        length = s[off[out + 1] - 1] - s[off[out]]
        if dist is not None:
            t = np.clip(0.5 * (dist[v[out]] + length - dist[u[out]]), 0.0, length)
        else:
            t = 0.5 * length
        # Cut point by interpolation along the polyline.
        target = s[off[out]] + t
        k = np.searchsorted(s, target, side="right") - 1
        k = np.clip(k, off[out], np.maximum(off[out + 1] - 2, off[out]))
        seg = s[np.minimum(k + 1, len(s) - 1)] - s[k]
        frac = np.where(seg > 0, (target - s[k]) / np.where(seg > 0, seg, 1), 0.0)
        frac = np.clip(frac, 0.0, 1.0)
        k1 = np.minimum(k + 1, off[out + 1] - 1)
        cut_xyz = graph.points[k] + frac[:, None] * (graph.points[k1] - graph.points[k])
        cut_r = graph.point_radius[k] + frac * (graph.point_radius[k1] - graph.point_radius[k])
        # Interior points on each side of the cut.
        cnt = np.maximum(off[out + 1] - off[out] - 2, 0)
        idx = np.repeat(off[out] + 1, cnt) + (np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt))
        before = s[idx] - np.repeat(s[off[out]], cnt) < np.repeat(t, cnt)
        na = np.bincount(np.repeat(np.arange(len(out)), cnt), before, len(out)).astype(np.int64)
        nb = cnt - na
        # Side u: first na interior points in order; side v: the rest, from v backwards.
        ja = np.arange(na.sum()) - np.repeat(np.cumsum(na) - na, na)
        src_a = np.repeat(off[out] + 1, na) + ja
        jb = np.arange(nb.sum()) - np.repeat(np.cumsum(nb) - nb, nb)
        src_b = np.repeat(off[out + 1] - 2, nb) - jb
        pa, last_a = _chain_parents(na, local[u[out]], base)
        base += len(src_a)
        pb, last_b = _chain_parents(nb, local[v[out]], base)
        base += len(src_b)
        parents += [pa, pb, last_a, last_b]
        coords += [graph.points[src_a], graph.points[src_b], cut_xyz, cut_xyz]
        radius += [graph.point_radius[src_a], graph.point_radius[src_b], cut_r, cut_r]
        n_cut = len(out)
    elif cut not in ("split", "drop"):
        raise InputError(f"cut must be 'split' or 'drop', not {cut!r}")
    meta = {"root_node": int(root), "method": method, "cut": cut, "n_cut": int(n_cut),
            "n_dropped": int(len(out)) if cut == "drop" else 0,
            "component_nodes": int(len(nodes)), "left_out_edges": out.tolist(), "unit": graph.unit}
    return Tree(np.concatenate(parents), np.concatenate(coords), np.concatenate(radius), meta)


def spanning_trees(graph, root=None, method="shortest", n=1, seed=0, cut="split"):
    """Point-level spanning trees of the component that contains ``root``.

    Parameters
    ----------
    graph : SkeletonGraph
    root : int, optional
        Root node; default :func:`choose_root` (thickest node of the largest
        component).
    method : {'shortest', 'minimum', 'widest', 'random'}
        ``shortest``: shortest-path tree by length from the root (Dijkstra
        1959), which keeps every node's distance along the network.
        ``minimum``: minimum spanning tree by length (Kruskal 1956).
        ``widest``: maximum spanning tree by mean branch radius, which keeps
        thick trunks and drops thin cross-links.  ``random``: uniform random
        spanning trees by loop-erased random walks (Wilson 1996, Proc 28th ACM
        STOC 296), parallel branches counted as distinct.
    n : int
        Number of trees (only ``random`` gives different trees; seeds
        ``seed, seed + 1, ...``).
    seed : int
    cut : {'split', 'drop'}
        What happens to a branch left out of the tree.  ``split`` cuts it in
        two, at the point whose distances from the root along either side
        are equal for ``shortest`` and at its midpoint otherwise; both pieces
        stay, so total length is kept and every cut adds two tips.  ``drop``
        removes it.

    Returns
    -------
    list of Tree
        Every polyline point is a tree point; the first points are the
        component's nodes.  ``tree.meta`` records the rule and the number of
        cuts.
    """
    if graph.n_nodes == 0:
        raise InputError("the graph has no nodes; nothing to span")
    if method not in TREE_METHODS:
        raise InputError(f"unknown tree method {method!r}; choose one of {', '.join(TREE_METHODS)}")
    if root is None:
        root = choose_root(graph)
    root = int(root)
    if not 0 <= root < graph.n_nodes:
        raise InputError(f"root {root} is not a node index (graph has {graph.n_nodes} nodes)")
    if int(n) < 1:
        raise InputError("n must be at least 1")
    labels = graph.component_labels()
    nodes = np.flatnonzero(labels == labels[root])
    count = int(n) if method == "random" else 1
    trees = []
    for i in range(count):
        pn, pe = _tree_edges(graph, root, nodes, method, int(seed) + i)
        dist = None
        if method == "shortest":
            dist = _node_distances(graph, root, pn, pe)
        t = _build_tree(graph, root, nodes, pn, pe, cut, method, dist)
        t.meta["seed"] = int(seed) + i if method == "random" else None
        trees.append(t)
    return trees


def _node_distances(graph, root, parent_node, parent_edge):
    """Distance from the root along the node-level tree, summed in exact lengths."""
    from ._kernels import accumulate_down, bfs_order
    n = graph.n_nodes
    has = np.flatnonzero(parent_node >= 0)
    by_parent = has[np.argsort(parent_node[has], kind="stable")]
    start = np.concatenate([[0], np.cumsum(np.bincount(parent_node[has], minlength=n))])
    order = bfs_order(root, start, by_parent)
    step = np.zeros(n)
    step[has] = graph.edge_length[parent_edge[has]]
    return accumulate_down(order, np.where(parent_node >= 0, parent_node, 0), step)
