"""Horton-Strahler orders of tree branches and the bifurcation ratio.

Strahler AN (1957). Quantitative analysis of watershed geomorphology. Trans
Am Geophys Union 38:913-920; Horton RE (1945). Geol Soc Am Bull 56:275-370.
Orders are defined on trees only; apply them to a spanning tree of a
cyclic network (:func:`skelmorph.spanning_trees`).
"""

from __future__ import annotations

import numpy as np

from ..tree import Tree

__all__ = ["strahler_order", "bifurcation_ratio"]


def strahler_order(tree):
    """Strahler order of every branch of a tree.

    Tips have order 1.  A point whose two highest child orders are equal (i)
    gets i + 1, otherwise the highest child order; only the two highest
    children of a multifurcation matter.  A branch (between consecutive
    critical points) takes the order of its lower end.

    Returns
    -------
    dict of arrays
        The branches of :meth:`Tree.branches` plus ``order``.

    Examples
    --------
    >>> from skelmorph import Tree
    >>> t = Tree.from_parents([-1, 0, 1, 1], [[0, 0], [3, 0], [5, 2], [7, -1]])
    >>> strahler_order(t)["order"].tolist()      # the stem, then the two tips
    [2, 1, 1]
    """
    from .._kernels import strahler_orders
    point_order = strahler_orders(tree.order, tree.parent)
    br = tree.branches()
    br["order"] = point_order[br["end"]]
    return br


def bifurcation_ratio(tree_or_branches):
    """Horton's bifurcation ratio R_B from stream counts per Strahler order.

    A stream of order i is a maximal run of consecutive branches of order
    i; N_i counts them.  R_B = 10**(-slope) of the least-squares line of
    log10 N_i against i (Horton 1945; Strahler 1957).

    Returns
    -------
    ratio : float
        NaN when fewer than two orders exist.
    counts : dict
        N_i by order i.
    """
    br = strahler_order(tree_or_branches) if isinstance(tree_or_branches, Tree) else tree_or_branches
    order = br["order"]
    # The branch above each branch is the one ending at its start point.
    end_to_branch = np.full(int(max(br["end"].max(initial=0), br["start"].max(initial=0))) + 1, -1)
    end_to_branch[br["end"]] = np.arange(len(order))
    above = end_to_branch[br["start"]]
    starts_stream = (above < 0) | (order[np.maximum(above, 0)] != order)
    levels, counts = np.unique(order[starts_stream], return_counts=True)
    table = {int(i): int(c) for i, c in zip(levels, counts)}
    if len(levels) < 2:
        return float("nan"), table
    slope = np.polyfit(levels.astype(float), np.log10(counts), 1)[0]
    return float(10 ** (-slope)), table


def diameter_strahler(tree, max_iter=50):
    """Diameter-defined Strahler orders of the branches of a tree.

    After Jiang, Kassab & Fung (1994, J Appl Physiol 76:882): start from the
    topological Strahler orders; for every order n take the mean D_n and SD
    S_n of the branch diameters (twice the mean point radius along the
    branch); a branch gets the lowest order n whose upper bound
    ((D_n + S_n) + (D_n+1 - S_n+1)) / 2 its diameter does not exceed (the
    highest order has no upper bound); then no branch may have a lower order
    than a branch below it (orders are raised towards the root).  Repeat
    until no order changes.  Consecutive branches of one order form an
    element; the connectivity matrix C[m, n] is the mean number of elements
    of order m that spring from one element of order n.

    Returns
    -------
    dict
        ``branches``: the branches of :meth:`Tree.branches` with
        ``diameter``, ``order`` (topological) and ``diameter_order``;
        ``orders``: per diameter order its ``elements``, mean ``length`` of an
        element, ``diameter`` mean and ``diameter_sd``; ``connectivity``:
        (k, k) array, rows m and columns n for orders 1..k;
        ``iterations``.

    Examples
    --------
    >>> from skelmorph import Tree
    >>> t = Tree.from_parents([-1, 0, 1, 1], [[0, 0], [3, 0], [5, 2], [7, -1]],
    ...                       radius=[2.0, 2.0, 1.0, 1.0])
    >>> diameter_strahler(t)["branches"]["diameter_order"].tolist()
    [2, 1, 1]
    """
    from .._kernels import branch_end_of_points
    br = strahler_order(tree)
    end, start = br["end"], br["start"]
    nb = len(end)
    owner = branch_end_of_points(tree.order, tree.parent, tree.is_critical)
    index_of_end = np.full(tree.n_points, -1, np.int64)
    index_of_end[end] = np.arange(nb)
    # Points below a branch's start up to its end belong to it.
    member = index_of_end[owner]
    member[tree.root] = -1
    r = np.asarray(tree.radius, float)
    ok = (member >= 0) & np.isfinite(r)
    diameter = 2 * np.bincount(member[ok], r[ok], nb) / np.maximum(
        np.bincount(member[ok], minlength=nb), 1)
    parent_branch = index_of_end[start]            # -1 at the root
    # Children before parents, for raising orders towards the root.
    depth = tree.path_distance[end]
    upward = np.argsort(-depth, kind="stable")
    order = br["order"].astype(np.int64).copy()
    for iteration in range(1, max_iter + 1):
        levels = np.unique(order)
        mean = np.array([diameter[order == n].mean() for n in levels])
        sd = np.array([diameter[order == n].std() for n in levels])
        upper = np.append(((mean + sd)[:-1] + (mean - sd)[1:]) / 2, np.inf)
        new = levels[np.minimum(np.searchsorted(upper, diameter, side="left"), len(levels) - 1)]
        for b in upward:                            # no branch below its child's order
            p = parent_branch[b]
            if p >= 0 and new[p] < new[b]:
                new[p] = new[b]
        if np.array_equal(new, order):
            break
        order = new
    # Elements: a branch joins its parent's element when their orders agree.
    element = np.arange(nb)
    for b in upward[::-1]:                          # parents first
        p = parent_branch[b]
        if p >= 0 and order[p] == order[b]:
            element[b] = element[p]
    kinds = np.unique(order)
    heads = np.unique(element)
    elem_order = order[heads]
    elem_length = np.bincount(np.searchsorted(heads, element), br["length"], len(heads))
    per = {"order": kinds.tolist(), "elements": [], "length": [], "diameter": [],
           "diameter_sd": []}
    for n in kinds:
        per["elements"].append(int(np.count_nonzero(elem_order == n)))
        per["length"].append(float(elem_length[elem_order == n].mean()))
        per["diameter"].append(float(diameter[order == n].mean()))
        per["diameter_sd"].append(float(diameter[order == n].std()))
    k = int(kinds.max()) if nb else 0
    springs = np.zeros((k, k))
    for h in heads:                                 # an element springs from its top's parent
        p = parent_branch[h]
        if p >= 0:
            springs[order[h] - 1, order[element[p]] - 1] += 1
    counts = np.array([np.count_nonzero(elem_order == n) for n in range(1, k + 1)], float)
    connectivity = springs / np.where(counts > 0, counts, 1)[None, :]
    br = dict(br)
    br.update(diameter=diameter, diameter_order=order)
    return {"branches": br, "orders": per, "connectivity": connectivity,
            "iterations": iteration}
