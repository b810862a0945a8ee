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
