"""Hierarchical loop decomposition (Katifori & Magnasco 2012) on invented
leaves whose nesting is known by construction: grids whose veins have set
widths, so that the order of removal, and with it the nesting tree, is
fixed.  Partition asymmetry as defined by van Pelt et al. (1992)."""

import numpy as np
import pytest

import skelmorph as sm
from skelmorph.measure.loops import loop_hierarchy, partition_asymmetry


def _leaf(rows, cols, cell=40, margin=12):
    """Veins on a grid: ``rows``/``cols`` are the widths (pixels) of the
    horizontal/vertical lines, outer lines included."""
    h = (len(rows) - 1) * cell + 2 * margin
    w = (len(cols) - 1) * cell + 2 * margin
    img = np.zeros((h, w), bool)
    for i, width in enumerate(rows):
        c, k = margin + i * cell, width // 2
        img[c - k:c + k + 1, margin - 6:w - margin + 6] = True
    for i, width in enumerate(cols):
        c, k = margin + i * cell, width // 2
        img[margin - 6:h - margin + 6, c - k:c + k + 1] = True
    return img


def test_partition_asymmetry_values():
    # van Pelt et al. 1992: |r - s| / (r + s - 2); undefined for two leaves.
    np.testing.assert_allclose(partition_asymmetry([1, 2, 3, 8], [1, 2, 1, 8]),
                               [np.nan, 0.0, 1.0, 0.0])


def test_balanced_nesting_of_a_four_by_four_leaf():
    """Thin veins (3 px) split pairs, medium ones (5) pairs of pairs, the
    central cross (9 then 11) quadrants: a perfectly balanced tree of 16
    areoles, 4 levels, partition asymmetry 0, nesting number 1."""
    img = _leaf(rows=[13, 3, 11, 3, 13], cols=[13, 5, 9, 5, 13])
    g = sm.skeleton_graph(img)
    summary, table = loop_hierarchy(g, img, (1.0, 1.0))
    assert summary["loop_merges"] == 15
    assert summary["loop_nesting_levels"] == 4
    assert summary["loop_partition_asymmetry"] == pytest.approx(0.0)
    assert summary["loop_nesting_number"] == pytest.approx(1.0)
    root = np.flatnonzero(table["parent"] == -1)
    assert len(root) == 1 and table["areoles"][root[0]] == 16
    assert table["area"][root[0]] == pytest.approx(table["area"][:16].sum())
    # the joins of each level come from the veins of that level's width
    for level, width in ((1, 3), (2, 5), (3, 9), (4, 11)):
        w = table["vein_width"][table["level"] == level]
        assert np.all(np.abs(w - width) < 1.6), (level, w)


def test_a_strip_of_loops_added_one_by_one():
    """Four areoles in a row, separated by veins of widths 3 < 5 < 7: each
    removal adds one areole to the growing loop, asymmetry 1, nesting 0."""
    img = _leaf(rows=[13, 13], cols=[13, 3, 5, 7, 13])
    g = sm.skeleton_graph(img)
    summary, table = loop_hierarchy(g, img, (1.0, 1.0))
    assert summary["loop_merges"] == 3 and summary["loop_nesting_levels"] == 3
    assert summary["loop_partition_asymmetry"] == pytest.approx(1.0)
    assert summary["loop_nesting_number"] == pytest.approx(0.0)
    np.testing.assert_array_equal(table["areoles"][4:], [2, 3, 4])


def test_scale_invariance_and_the_venation_set(tmp_path):
    img = _leaf(rows=[13, 3, 11, 3, 13], cols=[13, 5, 9, 5, 13])
    res = sm.analyze(img, spacing=(2.5, 2.5), unit="um", measures="venation", n_radii=0,
                     tree=None, out=tmp_path)
    assert res.summary["loop_nesting_levels"] == 4
    assert res.summary["loop_nesting_number"] == pytest.approx(1.0)
    assert res.summary["units"]["loop_nesting_number"] == "1"
    assert (tmp_path / "loop_hierarchy.csv").exists()
    assert (tmp_path / "loop_hierarchy.png").exists()
    widths = res.tables["loop_hierarchy"]["vein_width"]
    assert widths.max() == pytest.approx(11 * 2.5, abs=1.6 * 2.5)  # scales with the pixel


def test_three_dimensional_input_is_refused():
    from skelmorph.errors import InputError
    from skelmorph.phantoms import torus
    ph = torus()
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    with pytest.raises(InputError, match="2D"):
        loop_hierarchy(g, ph.mask, ph.spacing)


def test_areole_shapes_of_square_and_round_areoles():
    """Squares: area exact, circularity pi/4 (analytic) within the Crofton
    estimate's few percent; discs cut out of a plate: circularity 1."""
    from skelmorph.measure.venation import areole_shapes
    img = _leaf(rows=[13, 3, 11, 3, 13], cols=[13, 5, 9, 5, 13])
    summary, table = areole_shapes(img, (2.0, 2.0))
    assert len(table["area"]) == 16
    # Four-direction Crofton reads axis-aligned edges about 6 % short (measured
    # here: 127.8 for a 34 px square whose pixel outline is 136), so a square
    # reads about 0.89 instead of pi/4.
    assert np.pi / 4 < summary["mean_areole_circularity"] < 0.9
    # a vein of odd width w covers w pixels, so a cell between veins of
    # widths a and b is 40 - (a + b) // 2 - 1 pixels wide (by construction)
    rows, cols = [13, 3, 11, 3, 13], [13, 5, 9, 5, 13]
    side = lambda ws: [40 - ws[i] // 2 - ws[i + 1] // 2 - 1 for i in range(4)]  # noqa: E731
    expected = sorted(h * w * 4.0 for h in side(rows) for w in side(cols))
    np.testing.assert_allclose(np.sort(table["area"]), expected)
    plate = np.ones((200, 200), bool)
    yy, xx = np.mgrid[:200, :200]
    for cy, cx in ((50, 50), (50, 150), (150, 100)):
        plate[np.hypot(yy - cy, xx - cx) < 35] = False
    summary, table = areole_shapes(plate, (1.0, 1.0))
    assert len(table["area"]) == 3
    np.testing.assert_allclose(table["perimeter"], 2 * np.pi * 35, rtol=0.02)
    np.testing.assert_allclose(table["circularity"], 1.0, atol=0.03)
    aniso, _ = areole_shapes(plate, (1.0, 2.0))
    assert np.isnan(aniso["mean_areole_perimeter"])


def test_major_and_minor_vein_length_by_width():
    """VLA split at a vein width (Sack & Scoffoni 2013's major/minor veins):
    on the invented leaf the four thin inner lines (3 and 5 px) are minor,
    each 160 px long between the outer veins, by construction."""
    from skelmorph.measure.venation import venation_measures
    img = _leaf(rows=[13, 3, 11, 3, 13], cols=[13, 5, 9, 5, 13])
    g = sm.skeleton_graph(img)
    out = venation_measures(g, img, (1.0, 1.0), major_width=7.0)
    assert out["major_VLA"] + out["minor_VLA"] == pytest.approx(out["VLA"])
    assert out["minor_VLA"] * out["lamina_area"] == pytest.approx(4 * 160, rel=0.03)
    assert "major_VLA" not in venation_measures(g, img, (1.0, 1.0))
