"""Vein order classes of a leaf's venation by width and continuity.

Sack & Scoffoni (2013) sort veins into orders: the midrib is the first-
order (1°) vein; second-order (2°) veins branch off it; third-order (3°)
veins branch off those and, with them, make the major network; the finer
orders are the minor veins.  This module assigns such orders to the branches
of a vein graph with a rule of ours, stated here (the paper classifies by
eye and by width):

1. Keep the widest connections: the maximum spanning tree of the graph with
   branch width (twice the volume-equivalent radius) as weight.  It holds
   the widest path from the root to every node.
2. Walk the tree from the root (the leaf base).  At every node the incoming
   vein continues into its widest child branch if that branch is about as
   wide (at least ``CONTINUE_RATIO`` of the incoming width); every other
   child branch starts a vein one order higher.  At the root, which may sit
   on the midrib rather than at its end, the two widest branches are both
   1°.
3. A branch left out of the tree closes a loop.  It continues a vein at its
   ends that is about as wide (the most major such), else it is one order
   higher than the highest order at its ends: a vein joining two 2° veins
   is 3°.

Orders 1, 2 and 3 are the major veins; 4 stands for fourth and higher
orders, the minor veins.

References
----------
Sack L, Scoffoni C (2013) Leaf venation: structure, function, development,
evolution, ecology and applications in the past, present and future. New
Phytol 198:983-1000.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from scipy import sparse
from scipy.sparse import csgraph

from ..errors import InputError

__all__ = ["vein_orders", "N_CLASSES"]

#: Order classes reported: 1, 2, 3 and 4 for fourth and higher.
N_CLASSES = 4

#: A branch continues a vein when at least this share of its width.
CONTINUE_RATIO = 0.7


@njit(cache=True)
def _propagate(order_nodes, parent_edge, parent_node, continues, edge_order):
    """Orders along the tree in breadth-first order: a child branch keeps its
    parent branch's order when it continues the vein, else one more."""
    for i in range(order_nodes.size):
        v = order_nodes[i]
        e = parent_edge[v]
        if e < 0:
            continue
        u = parent_node[v]
        pe = parent_edge[u]
        if pe < 0:  # a branch at the root
            edge_order[e] = 1 if continues[v] else 2
        else:
            edge_order[e] = edge_order[pe] + (0 if continues[v] else 1)


def vein_orders(graph, root, return_starts=False):
    """Vein order of every branch (1 midrib, 2, 3, ... by continuity).

    Parameters
    ----------
    graph : SkeletonGraph
    root : int
        Node at the leaf base (or on the midrib).
    return_starts : bool
        Also return which branches start a vein (the others continue one).

    Returns
    -------
    orders : int array (n_edges,)
        The order of each branch (0 for branches not connected to the
        root), not yet clipped to :data:`N_CLASSES`.
    starts : bool array (n_edges,), only with ``return_starts``
        One branch per vein: counting ``starts & (orders == k)`` counts the
        veins of order k.
    """
    n, m = graph.n_nodes, graph.n_edges
    if not 0 <= int(root) < n:
        raise InputError(f"root node {root} is not a node of the graph ({n} nodes)")
    root = int(root)
    width = 2.0 * np.asarray(graph.branch_radius(), float) * np.ones(m)
    width = np.where(np.isfinite(width), width, 0.0)
    a, b = graph.edges[:, 0], graph.edges[:, 1]
    # One candidate per node pair, the widest (parallel branches collapse).
    proper = np.flatnonzero(a != b)
    lo, hi = np.minimum(a, b)[proper], np.maximum(a, b)[proper]
    pick = np.lexsort((-width[proper], hi, lo))
    lo, hi, cand = lo[pick], hi[pick], proper[pick]
    first = np.ones(len(cand), bool)
    first[1:] = (lo[1:] != lo[:-1]) | (hi[1:] != hi[:-1])
    lo, hi, cand = lo[first], hi[first], cand[first]
    # Maximum spanning tree: minimum over a positive cost that falls with width.
    cost = (width.max() + 1.0) - width[cand]
    tree = csgraph.minimum_spanning_tree(sparse.coo_matrix((cost, (lo, hi)), shape=(n, n)))
    tree = tree + tree.T
    order_nodes, pred = csgraph.breadth_first_order(tree, root, directed=False)
    # The branch from each node's parent: the candidate of that node pair.
    key = lo.astype(np.int64) * n + hi
    sorter = np.argsort(key)
    parent_edge = np.full(n, -1, np.int64)
    child = order_nodes[order_nodes != root]
    par = pred[child]
    pair = np.minimum(child, par).astype(np.int64) * n + np.maximum(child, par)
    parent_edge[child] = cand[sorter[np.searchsorted(key, pair, sorter=sorter)]]
    parent_node = np.where(pred >= 0, pred, -1).astype(np.int64)
    # A child continues its parent's vein when its branch is the widest of
    # the parent's children (the two widest at the root).
    w_child = width[parent_edge[child]]
    rank_sort = np.lexsort((-w_child, par))
    rank = np.empty(len(child), np.int64)
    starts = np.r_[0, np.flatnonzero(np.diff(par[rank_sort])) + 1]
    group = np.repeat(starts, np.diff(np.r_[starts, len(child)]))
    rank[rank_sort] = np.arange(len(child)) - group
    continues = np.zeros(n, np.bool_)
    pe = parent_edge[par]
    incoming = np.where(pe >= 0, width[np.maximum(pe, 0)], 0.0)
    continues[child] = np.where(par == root, rank <= 1,
                                (rank == 0) & (w_child >= CONTINUE_RATIO * incoming))
    edge_order = np.zeros(m, np.int64)
    starts = np.zeros(m, bool)
    starts[parent_edge[child]] = ~continues[child]
    at_root = child[par == root]
    if at_root.size:  # the midrib is one vein, whichever way it leaves the root
        starts[parent_edge[at_root]] = False
        starts[parent_edge[at_root[np.argmax(width[parent_edge[at_root]])]]] = True
    _propagate(order_nodes.astype(np.int64), parent_edge, parent_node, continues, edge_order)
    # Branches off the tree: the order of the closest-width tree branch at their ends.
    in_tree = np.zeros(m, bool)
    in_tree[parent_edge[child]] = True
    off = np.flatnonzero(~in_tree & (edge_order == 0))
    if off.size:
        t_edges = np.flatnonzero(in_tree)
        ends = np.concatenate([graph.edges[t_edges, 0], graph.edges[t_edges, 1]])
        owner = np.concatenate([t_edges, t_edges])
        by_node = np.argsort(ends, kind="stable")
        ends, owner = ends[by_node], owner[by_node]
        node_start = np.searchsorted(ends, np.arange(n + 1))
        q_edge, q_cand = [], []
        for side in (0, 1):
            v = graph.edges[off, side]
            cnt = node_start[v + 1] - node_start[v]
            q_edge.append(np.repeat(off, cnt))
            base = np.repeat(node_start[v] - np.r_[0, np.cumsum(cnt)[:-1]], cnt)
            q_cand.append(owner[base + np.arange(cnt.sum())])
        q_edge, q_cand = np.concatenate(q_edge), np.concatenate(q_cand)
        if q_edge.size:
            w_e, w_c = width[q_edge], width[q_cand]
            alike = np.minimum(w_e, w_c) >= CONTINUE_RATIO * np.maximum(w_e, w_c)
            o_c = edge_order[q_cand]
            big = np.iinfo(np.int64).max
            most_major = np.full(m, big, np.int64)
            np.minimum.at(most_major, q_edge[alike], o_c[alike])
            highest = np.zeros(m, np.int64)
            np.maximum.at(highest, q_edge, o_c)
            edge_order[off] = np.where(most_major[off] < big, most_major[off],
                                       np.where(highest[off] > 0, highest[off] + 1, 0))
            starts[off] = (most_major[off] == big) & (highest[off] > 0)
    if return_starts:
        return edge_order, starts
    return edge_order
