"""Hierarchical loop decomposition of a 2D vein network.

Katifori E, Magnasco MO (2012) Quantifying loopy network architectures.
PLoS ONE 7:e37994.  The loops of a planar network (here the areoles: the
enclosed gaps of the lamina) are merged by removing veins in order of
increasing width: a vein that separates two different loops joins them
into one.  The merges form a binary tree (the *nesting tree*) whose leaves
are the areoles and whose root is the whole network; a network whose
loops nest inside loops of thicker veins gives a tree of many levels,
one whose veins are all alike a tree whose shape follows the order of the
ties.

Each merge (internal node) with subtrees of r and s areoles has the
partition asymmetry |r - s| / (r + s - 2) (van Pelt J, Uylings HBM,
Verwer RWH, Pentney RJ, Woldenberg MJ (1992) Tree asymmetry - a sensitive
and practical measure for binary topological trees. Bull Math Biol
54:759-784; nodes with r + s = 2 are left out, as there).  Reported:
the mean partition asymmetry of the nesting tree, the *nesting number*
1 - (that mean), the tree's height in merge levels, and per node the
merged loop's area, the width of the vein whose removal made it, and its
level.

Which two loops a vein separates is read from the image: the areole
labels just beyond the vein's edge on both sides of its inner points.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .venation import areole_labels, lamina_mask

__all__ = ["loop_hierarchy", "partition_asymmetry"]


def partition_asymmetry(r, s):
    """|r - s| / (r + s - 2) for subtrees of r and s leaves (NaN when r + s = 2)."""
    r, s = np.asarray(r, float), np.asarray(s, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(r + s > 2, np.abs(r - s) / (r + s - 2), np.nan)


def _sides(graph, labels, spacing, shift):
    """For every branch, the areole labels on its two sides (0 = none), by
    majority over its inner points, read one pixel beyond the vein's edge."""
    from ..polyline import edge_index
    pts = (graph.points - shift) / spacing  # pixel coordinates
    eid = edge_index(graph.offsets)
    n_edges = graph.n_edges
    out = np.zeros((n_edges, 2), np.int64)
    if n_edges == 0:
        return out
    tangent = np.zeros_like(pts)
    inner = np.zeros(len(pts), bool)
    same_prev = np.r_[False, eid[1:] == eid[:-1]]
    same_next = np.r_[eid[:-1] == eid[1:], False]
    inner[same_prev & same_next] = True
    tangent[inner] = pts[np.flatnonzero(inner) + 1] - pts[np.flatnonzero(inner) - 1]
    norm = np.linalg.norm(tangent, axis=1)
    inner &= norm > 0
    normal = np.zeros_like(pts)
    normal[inner] = np.column_stack([-tangent[inner, 1], tangent[inner, 0]]) / norm[inner, None]
    reach = graph.branch_radius()[eid] / np.min(spacing) + 1.5
    shape = np.array(labels.shape)
    for side, sign in enumerate((1.0, -1.0)):
        probe = np.rint(pts + sign * reach[:, None] * normal).astype(np.int64)
        ok = inner & np.all((probe >= 0) & (probe < shape), axis=1)
        lab = np.zeros(len(pts), np.int64)
        lab[ok] = labels[probe[ok, 0], probe[ok, 1]]
        # Majority label per branch among points that see an areole.
        seen = ok & (lab > 0)
        if not seen.any():
            continue
        key = eid[seen] * (labels.max() + 1) + lab[seen]
        uniq, count = np.unique(key, return_counts=True)
        e_of, l_of = uniq // (labels.max() + 1), uniq % (labels.max() + 1)
        order = np.lexsort((-count, e_of))
        first = np.r_[True, e_of[order][1:] != e_of[order][:-1]]
        out[e_of[order][first], side] = l_of[order][first]
    return out


def loop_hierarchy(graph, veins, spacing, region=None, origin=None):
    """Nesting tree of the areoles by vein width (Katifori & Magnasco 2012).

    Parameters
    ----------
    graph : SkeletonGraph (2D)
    veins : bool array (2D)
    spacing : (2,) float
    region : bool array, optional
        The lamina; default the network's filled outline.
    origin : (2,) int, optional
        Pixel index of ``veins[0, 0]`` in the image the graph refers to.

    Returns
    -------
    summary : dict
        ``loop_nesting_levels`` (height of the nesting tree),
        ``loop_partition_asymmetry`` (mean over merges),
        ``loop_nesting_number`` (1 - that mean) and ``loop_merges``.
    table : dict of arrays
        One row per tree node (leaves first, in areole order): ``node``,
        ``parent`` (-1 at a root), ``areoles`` (leaves below), ``area``,
        ``vein_width`` (of the vein whose removal made the node; 0 for
        leaves), ``level`` (0 for leaves; 1 + the higher child's level)
        and ``partition_asymmetry``.
    """
    veins = np.asarray(veins, bool)
    if veins.ndim != 2 or graph.ndim != 2:
        raise InputError(f"the loop hierarchy needs a 2D image; this one is {veins.ndim}D")
    spacing = np.asarray(spacing, float)
    shift = np.zeros(2) if origin is None else np.asarray(origin, float) * spacing
    lamina, _ = lamina_mask(veins, region)
    labels, n_areoles = areole_labels(veins, lamina)
    areas = np.bincount(labels.ravel(), minlength=n_areoles + 1)[1:] * float(np.prod(spacing))
    sides = _sides(graph, labels, spacing, shift)
    width = 2.0 * np.asarray(graph.branch_radius(), float) * np.ones(graph.n_edges)
    between = np.flatnonzero((sides[:, 0] > 0) & (sides[:, 1] > 0) & (sides[:, 0] != sides[:, 1]))
    order = between[np.lexsort((between, width[between]))]  # thinnest first, ties by branch id
    # Union-find over areoles; node ids: leaves 0..k-1, merges k, k+1, ...
    parent_uf = np.arange(n_areoles)
    node_of = np.arange(n_areoles)
    parent, leaves, area, vein_w, level = ([-1] * n_areoles, [1] * n_areoles,
                                           list(areas), [0.0] * n_areoles, [0] * n_areoles)
    children = []

    def find(i):
        while parent_uf[i] != i:
            parent_uf[i] = parent_uf[parent_uf[i]]
            i = parent_uf[i]
        return i

    for e in order.tolist():
        a, b = find(sides[e, 0] - 1), find(sides[e, 1] - 1)
        if a == b:
            continue  # already one loop: the vein now ends inside it
        na, nb = node_of[a], node_of[b]
        new = len(parent)
        parent.append(-1)
        parent[na] = parent[nb] = new
        leaves.append(leaves[na] + leaves[nb])
        area.append(area[na] + area[nb])
        vein_w.append(float(width[e]))
        level.append(1 + max(level[na], level[nb]))
        children.append((na, nb))
        parent_uf[b] = a
        node_of[a] = new
    n_nodes = len(parent)
    asym = np.full(n_nodes, np.nan)
    if children:
        ch = np.asarray(children)
        lv = np.asarray(leaves)
        asym[n_areoles:] = partition_asymmetry(lv[ch[:, 0]], lv[ch[:, 1]])
    merged = asym[n_areoles:]
    mean_q = float(np.nanmean(merged)) if np.isfinite(merged).any() else float("nan")
    summary = {
        "loop_merges": int(len(children)),
        "loop_nesting_levels": int(max(level)) if level else 0,
        "loop_partition_asymmetry": mean_q,
        "loop_nesting_number": 1.0 - mean_q if np.isfinite(mean_q) else float("nan"),
    }
    table = {"node": np.arange(n_nodes), "parent": np.asarray(parent, np.int64),
             "areoles": np.asarray(leaves, np.int64), "area": np.asarray(area, float),
             "vein_width": np.asarray(vein_w, float), "level": np.asarray(level, np.int64),
             "partition_asymmetry": asym}
    return summary, table
