"""Diameter-defined Strahler orders (skelmorph.measure.orders) on trees built
with known orders and diameters."""

import numpy as np
import pytest

from skelmorph import Tree
from skelmorph.measure.orders import diameter_strahler, strahler_order

from conftest import binary_tree_layout


def binary_tree(depth, radius_of_generation, length=10.0, extra=None):
    """A stem then ``depth`` generations of binary splits; generation g has
    radius radius_of_generation(g).  ``extra``: a twig radius that splits the
    first tip once more into two twigs."""
    parent, coords, radius, _ = binary_tree_layout(depth, radius_of_generation,
                                                   lambda g: length, spread=0.5)
    if extra is not None:
        tip = len(coords) - 2 ** depth          # the first tip of the last generation
        x, y = coords[tip]
        for turn in (-0.5, 0.5):
            coords.append([x + 2 * np.cos(np.pi / 2 + turn), y + 2 * np.sin(np.pi / 2 + turn)])
            parent.append(tip)
            radius.append(extra)
    return Tree.from_parents(parent, coords, radius=radius)


def test_diameters_that_follow_topology_keep_the_orders():
    """Construction: diameters halving each generation agree with the
    topological orders; a symmetric binary tree has 2^(k-n) elements of
    order n and each element of order n carries two of order n - 1
    (connectivity C[n-1, n] = 2, Jiang et al. 1994's matrix)."""
    depth = 4
    t = binary_tree(depth, lambda g: 8.0 / 2 ** g)
    res = diameter_strahler(t)
    assert np.array_equal(res["branches"]["diameter_order"], strahler_order(t)["order"])
    assert res["orders"]["elements"] == [2 ** (depth - n + 1) for n in range(1, depth + 2)]
    c = res["connectivity"]
    for n in range(2, depth + 2):
        assert c[n - 2, n - 1] == pytest.approx(2.0)
    assert res["orders"]["diameter"] == pytest.approx([2 * 8.0 / 2 ** g
                                                       for g in range(depth, -1, -1)])


def test_thin_twigs_do_not_raise_the_order():
    """Construction: two twigs as thin as the finest tips split one tip.
    Topologically that tip becomes order 2; by diameter it stays order 1,
    and the rest of the tree keeps its orders."""
    t = binary_tree(3, lambda g: 8.0 / 2 ** g, extra=1.0)
    topo = strahler_order(t)["order"]
    res = diameter_strahler(t)
    d_order = res["branches"]["diameter_order"]
    diam = res["branches"]["diameter"]
    raised = (topo == 2) & np.isclose(diam, 2.0)
    assert raised.sum() == 1                       # the tip that became a fork
    assert d_order[raised][0] == 1
    same = ~raised
    assert np.array_equal(d_order[same], topo[same])
    assert res["iterations"] >= 1
