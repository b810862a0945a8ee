"""Elder-rule persistence barcodes of rooted trees.

Kanari L et al. (2018). A topological representation of branching neuronal
morphologies. Neuroinformatics 16:3-13.  The elder rule itself: Edelsbrunner H, Harer J
(2010), Computational Topology, AMS.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..tree import Tree

__all__ = ["barcode", "filtration_values", "FILTRATIONS", "barcode_summary",
           "diagrams_from_table"]

FILTRATIONS = ("radial", "path", "axis")


def filtration_values(tree, filtration="radial", axis=None):
    """Per-point filtration values of a tree.

    ``radial``: straight-line distance to the root; ``path``: distance along
    the tree; ``axis``: projection of (point - root) on the direction
    ``axis`` (numpy axis order, normalised here); or any (n,) array.
    """
    if isinstance(filtration, str):
        if filtration == "radial":
            return tree.radial_distance
        if filtration == "path":
            return tree.path_distance
        if filtration == "axis":
            if axis is None:
                raise InputError("filtration 'axis' needs axis=(dz, dy, dx)")
            a = np.asarray(axis, float).reshape(-1)
            if len(a) != tree.ndim or not np.all(np.isfinite(a)) or not np.any(a):
                raise InputError(f"axis must be a non-zero direction with {tree.ndim} components")
            return (tree.coords - tree.coords[tree.root]) @ (a / np.linalg.norm(a))
        raise InputError(f"unknown filtration {filtration!r}; choose one of "
                         f"{', '.join(FILTRATIONS)} or pass an array")
    f = np.asarray(filtration, float).reshape(-1)
    if len(f) != tree.n_points:
        raise InputError(f"filtration array has {len(f)} values but the tree has {tree.n_points} points")
    if not np.all(np.isfinite(f)):
        raise InputError("filtration array contains NaN or infinite values")
    return f


def barcode(tree, filtration="radial", axis=None, return_leaves=False):
    """Elder-rule barcode of a rooted tree.

    Every tip starts a bar carrying f(tip).  Where branches meet at a point
    b, the branch carrying the largest value survives and every other one
    ends with the bar (carried value, f(b)); a k-way junction ends k - 1
    bars.  The survivor ends at the root with (carried value, f(root)).  Only
    tips, branch points and the root matter; points inside branches pass
    values through.  Exact ties between carried values go to the tip that
    comes first in position order; tied bars are equal, so the barcode (as a
    multiset) never depends on point numbering.

    Parameters
    ----------
    tree : Tree
    filtration : {'radial', 'path', 'axis'} or (n,) array
        See :func:`filtration_values`.
    axis : sequence of float, optional
        Direction for ``filtration='axis'``.
    return_leaves : bool
        Also return the tip that starts each bar.

    Returns
    -------
    (n_tips, 2) float64 array
        (birth, death) pairs, sorted by birth then death, both descending.
        One bar per tip.

    References
    ----------
    Kanari et al. (2018), Neuroinformatics 16:3, the topological morphology
    descriptor; the elder rule of persistent homology (Edelsbrunner & Harer
    2010).

    Examples
    --------
    A root at the origin, a stem to (3, 0) and two tips: the farther tip's
    bar runs from its distance to 0 (the root), the nearer one's ends at
    the fork, 3 from the root.

    >>> from skelmorph import Tree
    >>> t = Tree.from_parents([-1, 0, 1, 1], [[0, 0], [3, 0], [5, 2], [7, -1]])
    >>> barcode(t, "radial").round(2).tolist()
    [[7.07, 0.0], [5.39, 3.0]]
    """
    if not isinstance(tree, Tree):
        raise InputError("barcode needs a Tree (see Tree.from_parents or spanning_trees)")
    from .._kernels import elder_rule
    f = filtration_values(tree, filtration, axis)
    tips = tree.tips
    rank = np.full(tree.n_points, -1, np.int64)
    if len(tips):
        keys = [tree.coords[tips, k] for k in range(tree.ndim - 1, -1, -1)]
        # Larger value is elder; among equal values the smaller position wins.
        order = np.lexsort([-k for k in keys] + [f[tips]])
        rank[tips[order]] = np.arange(len(tips))
    births, deaths, leaves = elder_rule(tree.order, tree.parent, f, rank)
    idx = np.lexsort((-deaths, -births))
    bars = np.column_stack([births[idx], deaths[idx]]).astype(np.float64)
    return (bars, leaves[idx]) if return_leaves else bars


def barcode_summary(bars):
    """A few scalars of a barcode: count, total and largest persistence, mean birth."""
    bars = np.asarray(bars, float).reshape(-1, 2)
    pers = np.abs(bars[:, 0] - bars[:, 1])
    n = len(bars)
    return {
        "n_bars": int(n),
        "total_persistence": float(pers.sum()),
        "max_persistence": float(pers.max()) if n else 0.0,
        "mean_persistence": float(pers.mean()) if n else float("nan"),
        "mean_birth": float(bars[:, 0].mean()) if n else float("nan"),
    }


def graph_barcodes(graph, root="thickest", tree="shortest", n_trees=1, filtration="radial",
                   seed=0, point=None, face=None):
    """Root a graph, span it and compute the barcode of every spanning tree.

    The largest component is used.  With ``tree='random'`` and ``n_trees`` > 1
    the scalars are reported as the mean and standard deviation over the
    trees, so the choice of tree becomes a measured spread.

    Returns
    -------
    trees : list of Tree
    bars : list of (n, 2) arrays
    summary : dict
        Root node and rules, log number of spanning trees, and barcode,
        Strahler and Horton scalars (``*_sd`` over trees when several).
    """
    from ..measure.orders import bifurcation_ratio, strahler_order
    from ..rooting import choose_root, count_spanning_trees, spanning_trees

    r = choose_root(graph, root, point=point, face=face) if isinstance(root, str) else int(root)
    trees = spanning_trees(graph, r, method=tree, n=n_trees, seed=seed)
    bars = [barcode(t, filtration) for t in trees]
    rows = []
    for t, b in zip(trees, bars):
        s = barcode_summary(b)
        br = strahler_order(t)
        ratio, _ = bifurcation_ratio(br)
        s["max_strahler_order"] = int(br["order"].max()) if len(br["order"]) else 0
        s["bifurcation_ratio"] = ratio
        rows.append(s)
    summary = {
        "root_node": int(r),
        "root_position": [float(x) for x in graph.nodes[r]],
        "root_method": root if isinstance(root, str) else "node",
        "tree_method": tree,
        "n_trees": len(trees),
        "filtration": filtration if isinstance(filtration, str) else "array",
        "log_spanning_tree_count": float(count_spanning_trees(graph)),
        "tree_cuts": int(trees[0].meta["n_cut"]),
    }
    for key in rows[0]:
        name = key if key in ("max_strahler_order", "bifurcation_ratio") else f"barcode_{key}"
        vals = np.array([row[key] for row in rows], float)
        summary[name] = float(np.mean(vals))
        if len(rows) > 1:
            summary[name + "_sd"] = float(np.std(vals, ddof=1))
    return trees, bars, summary


def diagrams_from_table(table, samples, tree=0):
    """Barcodes of one spanning tree per sample from a long table (pandas) with
    ``sample``, ``tree``, ``birth``, ``death``; an empty (0, 2) array for a
    sample without bars."""
    out = {s: np.zeros((0, 2)) for s in samples}
    sel = table[table["tree"] == tree]
    for s, b in sel.groupby("sample", sort=False):
        if s in out:
            out[s] = b[["birth", "death"]].to_numpy(float)
    return [out[s] for s in samples]
