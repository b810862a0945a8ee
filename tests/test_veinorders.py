"""Vein order classes on an invented leaf whose orders are fixed by
construction: a midrib (13 px wide) from the base, 2° veins (7 px) branching
off it, 3° veins (4 px) joining neighbouring 2° veins, and minor veins
(2 px): free-ending veinlets off the 3° veins and connectors from a 3° vein
to the midrib.  The order definitions are those of Sack & Scoffoni (2013,
New Phytol 198:983): 2° veins branch off the midrib, 3° veins off 2° veins,
finer orders are minor veins.
"""

import numpy as np
import pytest

import skelmorph as sm
from skelmorph.errors import InputError
from skelmorph.measure.veinorders import vein_orders
from skelmorph.phantoms import draw_tubes

LEVELS = (320, 250, 180, 110)


def _leaf(scale=1.0):
    segs = [((380, 150), (20, 150), 13, 1)]
    for y in LEVELS:
        segs += [((y, 150), (y - 40, 30), 7, 2), ((y, 150), (y - 40, 270), 7, 2)]
    for y0, y1 in zip(LEVELS[:-1], LEVELS[1:]):
        for x in (90, 210):
            f = abs(x - 150) / 120
            segs.append(((y0 - 40 * f, x), (y1 - 40 * f, x), 4, 3))
            mid = (y0 + y1) / 2 - 40 * f
            # A free-ending veinlet off the 3° vein, away from the midrib.
            segs.append(((mid, x), (mid, x - 25 if x < 150 else x + 25), 2, 4))
    # Connectors from the 3° veins to the midrib (they close loops).
    for x in (90, 210):
        y = (LEVELS[1] + LEVELS[2]) / 2 - 20 + 6
        segs.append(((y, x), (y, 150), 2, 4))
    starts = np.array([s[0] for s in segs], float) * scale
    ends = np.array([s[1] for s in segs], float) * scale
    mask = draw_tubes((int(400 * scale), int(300 * scale)), (1.0, 1.0), starts, ends,
                      np.array([s[2] / 2 for s in segs]) * scale)
    return mask, starts, ends, np.array([s[3] for s in segs])


def _drawn_order(graph, starts, ends, drawn):
    """The drawn order of the segment nearest each branch's middle point."""
    out = np.zeros(graph.n_edges, int)
    for e in range(graph.n_edges):
        p = graph.points[graph.offsets[e]:graph.offsets[e + 1]]
        q = p[len(p) // 2]
        d = ends - starts
        t = np.clip(((q - starts) * d).sum(1) / (d * d).sum(1), 0, 1)
        out[e] = drawn[np.argmin(np.linalg.norm(starts + t[:, None] * d - q, axis=1))]
    return out


def _base(graph, scale=1.0):
    return int(np.argmin(np.linalg.norm(graph.nodes - np.array([380.0, 150.0]) * scale, axis=1)))


def test_orders_of_an_invented_leaf():
    mask, starts, ends, drawn = _leaf()
    g = sm.skeleton_graph(mask, (1.0, 1.0))
    orders, first = vein_orders(g, _base(g), return_starts=True)
    truth = _drawn_order(g, starts, ends, drawn)
    long = g.edge_length > 8  # short stubs between close junctions are ambiguous
    assert np.array_equal(np.minimum(orders, 4)[long], truth[long])
    assert int(np.count_nonzero(first & (orders == 2))) == 2 * len(LEVELS)
    assert int(np.count_nonzero(first & (orders == 1))) == 1


def test_root_on_the_midrib_gives_the_same_orders():
    # The root rule may pick a node in the middle of the midrib (the
    # thickest): the midrib then leaves the root both ways and stays 1°.
    mask, starts, ends, drawn = _leaf()
    g = sm.skeleton_graph(mask, (1.0, 1.0))
    mid = int(np.argmin(np.linalg.norm(g.nodes - np.array([LEVELS[1], 150.0]), axis=1)))
    long = g.edge_length > 8
    assert np.array_equal(np.minimum(vein_orders(g, mid), 4)[long],
                          np.minimum(vein_orders(g, _base(g)), 4)[long])


def test_vla_per_order_class_in_the_pipeline(tmp_path):
    # The drawn length per order, against VLA per class times the lamina
    # area (within 8 %: skeleton ends retract and junctions shift length);
    # twice the pixel count gives the same densities in the same unit.
    mask, starts, ends, drawn = _leaf()
    drawn_len = np.linalg.norm(ends - starts, axis=1)
    res = sm.analyze(mask, (1.0, 1.0), measures="venation", root_point=(380.0, 150.0),
                     root="point", tree=None, out=tmp_path / "leaf")
    assert (tmp_path / "leaf" / "vein_orders.png").stat().st_size > 1000
    import csv
    with open(tmp_path / "leaf" / "branches.csv") as f:
        assert {int(r["vein_order"]) for r in csv.DictReader(f)} == {1, 2, 3, 4}
    s = res.summary
    area = s["lamina_area"]
    for k, key in ((1, "VLA_1"), (2, "VLA_2"), (3, "VLA_3"), (4, "VLA_higher")):
        assert s[key] * area == pytest.approx(drawn_len[drawn == k].sum(), rel=0.08), key
    assert s["n_secondary_veins"] == 8
    assert s["mean_width_1"] > s["mean_width_2"] > s["mean_width_3"]
    assert s["mean_width_2"] == pytest.approx(7.0, rel=0.15)
    assert "vein_order" in res.branch_columns
    fine = sm.analyze(_leaf(2.0)[0], (0.5, 0.5), measures="venation",
                      root_point=(380.0, 150.0), root="point", tree=None).summary
    for key in ("VLA_1", "VLA_2", "VLA_3"):
        assert fine[key] == pytest.approx(s[key], rel=0.08), key


def test_bad_root():
    mask = _leaf()[0]
    g = sm.skeleton_graph(mask, (1.0, 1.0))
    with pytest.raises(InputError, match="root node"):
        vein_orders(g, g.n_nodes + 3)


def test_a_root_rule_that_finds_no_root_skips_the_orders_with_a_note():
    from skelmorph.pipeline import _rule_root
    from skelmorph.pipeline import SegmentationWarning
    g = sm.skeleton_graph(_leaf()[0], (1.0, 1.0))
    summary = {}
    with pytest.warns(SegmentationWarning, match="vein orders skipped"):
        assert _rule_root(g, ("point", None, None), summary, "vein_orders") is None
    assert "point" in summary["skipped_measures"]["vein_orders"]
