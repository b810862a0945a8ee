r"""Graph invariants from the poset of simple paths.

Definitions
-----------
A *simple path with j edges* is a sequence of j + 1 distinct vertices joined
by edges; in a multigraph the choice of each edge matters, so parallel edges
give distinct paths, and self-loops never lie on a simple path.  A path and
its reverse are the same path.  ``P_{m..k}(G)`` is the set of simple paths
with m <= j <= k edges (m = 0 or 1), ordered by "is a contiguous sub-path
of" (obtained by deleting end vertices).  Invariants: the path counts
(n_0, ..., n_k), the f-vector of the order complex Delta(P) (f_s = number of
chains p_0 < ... < p_s) and its Betti numbers over Z/2.

What makes them fast (with proofs)
----------------------------------
**Lemma 1 (down-sets are intervals).**  The sub-paths of a path p with j
edges are its vertex intervals [a, b], 0 <= a <= b <= j, with b - a >= m
edges; distinct intervals give distinct paths (their vertex sets differ,
since p's vertices are distinct) and sub-path order is interval inclusion.
So the down-set of p is isomorphic to the poset I_m(j) of such intervals,
which depends on j only.

**f-vector.**  Every chain has a unique top element p, and the chains with
top p are the chains of I_m(j) ending at [0, j].  Hence
f_s = sum_j n_j g_m(j, s), where g_m(j, s) counts chains of s + 1 intervals
ending at an interval of length j.  An interval of length L contains
L - L' + 1 intervals of length L', so g(L, 0) = 1 and
g(L, s) = sum_{m <= L' < L} (L - L' + 1) g(L', s - 1).

**Lemma 2 (long paths do not change the homotopy type).**  Let p have j >=
m + 2 edges.  Its open down-set Q (proper sub-intervals of length >= m) is
covered by the down-sets of [0, j-1] and [1, j] (every proper sub-interval
misses an end), each a cone with a top element; their intersection is the
down-set of [1, j-1], also a cone and non-empty because j - 2 >= m.  A chain
of Q lies in the down-set of its top element, so Delta(Q) is the union of two
contractible subcomplexes with contractible intersection, hence contractible.
Adding the paths of length j one by one (they are pairwise incomparable) thus
glues cones along contractible subcomplexes, which preserves homotopy type.
So Delta(P_{m..k}) ~ Delta(P_{m..m+1}) for k >= m + 1.

**m = 0.**  P_{0..1} is vertices and non-loop edges ordered by incidence; its
order complex is the barycentric subdivision of G without its self-loops.
So for k >= 1, b_0 = components of G (isolated vertices count) and
b_1 = E' - V + b_0, with E' the non-loop edges.  (k = 0: b_0 = V.)

**m = 1.**  P_{1..2} is non-loop edges and 2-paths; each 2-path lies above
exactly its two edges, so Delta is the subdivision of the graph L' with a
vertex per edge and an edge per 2-path.  L' is the line graph except that
two parallel edges are *not* joined (x, e, v, f, x repeats x).  So for k >= 2,
b_0 = components of L' and b_1 = n_2 - n_1 + b_0.  (k = 1: b_0 = n_1.)
No higher Betti numbers: every case is homotopy equivalent to a graph.

Path counts
-----------
Closed forms, exact for multigraphs (mu_uv = number of edges between u and
v, d'_v = non-loop degree): n_0 = V; n_1 = E'; n_2 = sum_v [C(d'_v, 2) -
sum_x C(mu_vx, 2)]; n_3 = sum over non-loop edges e = uv of
(d'_u - mu_uv)(d'_v - mu_uv) - sum_x mu_ux mu_vx (middle edge e, minus the
triangles).  Longer paths are enumerated by a compiled depth-first search
(cost about V * (mean degree - 1)^k).  The order complex itself is never
built.
"""

from __future__ import annotations

import numpy as np
from scipy import sparse
from scipy.sparse.csgraph import connected_components

from ..errors import InputError

__all__ = ["path_counts", "path_poset_invariants", "chain_counts"]


def _edges(graph):
    """(number of vertices, non-loop edge ends u, v) of a SkeletonGraph or networkx graph."""
    from ..graph import SkeletonGraph
    if isinstance(graph, SkeletonGraph):
        n, e = graph.n_nodes, graph.edges
    else:
        try:
            import networkx as nx
        except ImportError:  # pragma: no cover - networkx is a core dependency
            raise
        if not isinstance(graph, nx.Graph):
            raise InputError("graph must be a SkeletonGraph or a networkx graph")
        if graph.is_directed():
            graph = graph.to_undirected(as_view=False)
        index = {v: i for i, v in enumerate(graph.nodes)}
        n = len(index)
        e = np.array([(index[a], index[b]) for a, b, *_ in graph.edges], np.int64).reshape(-1, 2)
    e = np.asarray(e, np.int64).reshape(-1, 2)
    keep = e[:, 0] != e[:, 1]
    return int(n), e[keep, 0], e[keep, 1]


def _multiplicity(n, u, v):
    """Sparse symmetric matrix of edge multiplicities (no diagonal)."""
    m = sparse.coo_matrix((np.ones(len(u)), (u, v)), shape=(n, n))
    return (m + m.T).tocsr()


def path_counts(graph, k):
    """Number of simple paths with 0, 1, ..., k edges.

    Parameters
    ----------
    graph : SkeletonGraph or networkx graph (multigraphs allowed)
    k : int
        Longest path length, in edges.

    Returns
    -------
    (k + 1,) int64 array
        n_j = number of simple paths with j edges, a path and its reverse
        counted once; parallel edges give distinct paths, self-loops none.
        Closed forms for j <= 3, enumeration beyond (see the module notes).

    Examples
    --------
    >>> import networkx as nx
    >>> path_counts(nx.cycle_graph(4), 2).tolist()    # 4 vertices, 4 edges, 4 two-edge paths
    [4, 4, 4]
    """
    k = int(k)
    if k < 0:
        raise InputError("k must be >= 0")
    n, u, v = _edges(graph)
    out = np.zeros(k + 1, np.int64)
    out[0] = n
    if k >= 1:
        out[1] = len(u)
    if k >= 2 and n:
        mu = _multiplicity(n, u, v)
        deg = np.asarray(mu.sum(axis=1)).ravel().astype(np.int64)
        pairs_parallel = (mu.data * (mu.data - 1) // 2).astype(np.int64)
        out[2] = int((deg * (deg - 1) // 2).sum() - pairs_parallel.sum())
        if k >= 3 and len(u):
            muv = np.asarray(mu[u, v]).ravel().astype(np.int64)
            tri = np.asarray((mu @ mu)[u, v]).ravel().astype(np.int64)
            out[3] = int(((deg[u] - muv) * (deg[v] - muv) - tri).sum())
    if k >= 4 and n:
        from .._kernels import count_walk_paths
        ends = np.concatenate([u, v])
        nbr = np.concatenate([v, u])
        order = np.argsort(ends, kind="stable")
        start = np.concatenate([[0], np.cumsum(np.bincount(ends, minlength=n))])
        walks = count_walk_paths(start.astype(np.int64), nbr[order].astype(np.int64), k)
        out[4:] = walks[4:] // 2
    return out


def chain_counts(k, min_edges=0):
    """g[j, s]: chains of s + 1 sub-paths ending at a whole path with j edges.

    Exact integers (Python ints in an object array), j, s = 0..k.
    """
    m = int(min_edges)
    g = np.zeros((k + 1, k + 1), dtype=object)
    for L in range(m, k + 1):
        g[L, 0] = 1
        for s in range(1, k + 1):
            g[L, s] = sum((L - Lp + 1) * g[Lp, s - 1] for Lp in range(m, L))
    return g


def _line_components(n, u, v):
    """Components of L': edges joined when they form a simple 2-path."""
    e = len(u)
    if e == 0:
        return 0
    ends = np.concatenate([u, v])
    other = np.concatenate([v, u])
    eid = np.concatenate([np.arange(e), np.arange(e)])
    order = np.lexsort((other, ends))
    ends, other, eid = ends[order], other[order], eid[order]
    # At a vertex whose edges reach two or more distinct neighbours, every
    # incident edge forms a 2-path with some other one: chain them together.
    first = np.ones(len(ends), bool)
    first[1:] = ends[1:] != ends[:-1]
    group = np.cumsum(first) - 1
    new_nbr = np.ones(len(ends), bool)
    new_nbr[1:] = (ends[1:] != ends[:-1]) | (other[1:] != other[:-1])
    distinct = np.bincount(group, new_nbr.astype(int))
    same_vertex = ~first[1:]
    link = same_vertex & (distinct[group[1:]] >= 2)
    a, b = eid[:-1][link], eid[1:][link]
    adj = sparse.coo_matrix((np.ones(len(a)), (a, b)), shape=(e, e))
    return int(connected_components(adj, directed=False)[0])


def path_poset_invariants(graph, k, min_edges=0):
    """Path counts, f-vector and Betti numbers of the order complex of P_{m..k}(G).

    Parameters
    ----------
    graph : SkeletonGraph or networkx graph (multigraphs allowed)
    k : int
        Longest path, in edges.
    min_edges : {0, 1}
        Shortest path in the poset: 0 includes single vertices, 1 starts at
        edges.

    Returns
    -------
    dict
        ``counts`` (n_0..n_k, int array), ``f_vector`` (list of Python ints,
        f_0 = number of poset elements), ``betti`` (b_0, b_1; higher ones
        vanish), ``euler_characteristic`` (from the f-vector; equals
        b_0 - b_1), ``k`` and ``min_edges``.

    Notes
    -----
    Exact, without building the order complex: the f-vector follows from the
    path counts and the Betti numbers from G (min_edges = 0) or from its
    2-path graph (min_edges = 1) in O(V + E); the proofs are in the module
    docstring.
    """
    m = int(min_edges)
    if m not in (0, 1):
        raise InputError("min_edges must be 0 or 1")
    k = int(k)
    if k < m:
        raise InputError(f"k must be >= min_edges ({m}); the poset would be empty")
    counts = path_counts(graph, k)
    n, u, v = _edges(graph)
    g = chain_counts(k, m)
    f = [sum(int(counts[j]) * g[j, s] for j in range(m, k + 1)) for s in range(k - m + 1)]
    while len(f) > 1 and f[-1] == 0:
        f.pop()
    if m == 0:
        if k == 0:
            betti = (int(n), 0)
        else:
            mu = _multiplicity(n, u, v)
            b0 = int(connected_components(mu, directed=False)[0]) if n else 0
            betti = (b0, int(len(u) - n + b0))
    else:
        if k == 1:
            betti = (int(counts[1]), 0)
        else:
            b0 = _line_components(n, u, v)
            betti = (b0, int(counts[2] - counts[1] + b0))
    chi = sum((-1) ** s * x for s, x in enumerate(f))
    return {"counts": counts, "f_vector": f, "betti": betti, "euler_characteristic": int(chi),
            "k": k, "min_edges": m}
