"""The results registry: every numeric summary key has a unit and a
description, counts are integers, and no two keys hold the same quantity."""

import json
import warnings

import numpy as np
import pytest

import skelmorph as sm
from skelmorph.cli import main
from skelmorph.results import KINDS, MEASURES, describe, lookup, unit_of


@pytest.fixture(scope="module")
def summaries():
    warnings.simplefilter("ignore")
    out = {}
    ph = sm.phantoms.make("foam", seed=1)
    out["foam, all sets, random trees"] = sm.analyze(
        ph.mask, ph.spacing, measures="all", tree="random", n_trees=2, paths=2, n_radii=20,
        figures=False).summary
    out["foam, bone"] = sm.analyze(ph.mask, ph.spacing, measures="bone", n_radii=20,
                                   figures=False).summary
    ph = sm.phantoms.make("venation")
    out["venation, all sets"] = sm.analyze(ph.mask, ph.spacing, measures="all", n_radii=20,
                                           figures=False).summary
    yy, xx = np.mgrid[-22:23, -22:23]
    shell = (yy ** 2 + xx ** 2 <= 20 ** 2) & (yy ** 2 + xx ** 2 > 12 ** 2)
    out["tube, cortical and vessel"] = sm.analyze(
        np.repeat(shell[None], 30, axis=0), (1.0, 1.0, 1.0), measures=["cortical", "vessel"],
        n_radii=20, figures=False).summary
    ph = sm.phantoms.make("y")
    out["y, no sets"] = sm.analyze(ph.mask, ph.spacing, n_radii=20, figures=False).summary
    return out


def _numeric(summary):
    return {k: v for k, v in summary.items()
            if isinstance(v, (int, float)) and not isinstance(v, bool)}


def test_every_numeric_key_has_a_unit_and_a_description(summaries):
    for name, s in summaries.items():
        missing = sorted(set(_numeric(s)) - set(s["units"]))
        assert not missing, f"{name}: no unit for {missing}"
        assert all(describe(k) for k in _numeric(s)), name


def test_counts_are_integers(summaries):
    for name, s in summaries.items():
        for key, value in _numeric(s).items():
            if lookup(key).kind == "count" and not key.endswith("_sd"):
                assert isinstance(value, int), f"{name}: {key} = {value!r}"
    text = json.dumps(summaries["foam, bone"])
    assert '"barcode_n_bars": 1' not in text or '.0' not in text.split('"barcode_n_bars": ')[1][:8]


#: Pairs that differ by definition but coincide on some data.
COINCIDENT = {frozenset({"mean_inflection_count_metric", "mean_distance_metric"}):
              "equal when no branch has an inflection (the phantoms' straight veins)",
              frozenset({"rBV/TV", "BV/TV"}): "equal when no piece is a plate (rod foams)",
              frozenset({"rTb.Th", "Tb.Th"}): "equal when no piece is a plate (rod foams)"}


def test_no_two_keys_hold_the_same_value(summaries):
    """Duplicates by definition are gone (volume_fraction = BV/TV, loop
    density = areole density, one root node): no two non-count values agree
    on the larger networks (a three-branch Y has coincidences by its size)."""
    for name, s in summaries.items():
        if s["n_branches"] < 10:
            continue
        values = {k: v for k, v in _numeric(s).items() if lookup(k).kind != "count"
                  and lookup(k).kind != "identifier" and np.isfinite(v) and v != 0}
        seen = {}
        for k, v in values.items():
            twin = next((j for j, w in seen.items() if np.isclose(v, w, rtol=1e-12)
                         and frozenset({j, k}) not in COINCIDENT), None)
            assert twin is None, f"{name}: {k} and {twin} both hold {v}"
            seen[k] = v


def test_units_follow_the_image_unit_and_dimension(tmp_path):
    assert unit_of("Conn.D", "mm", 3) == "mm^-3"
    assert unit_of("length_density", "um", 2) == "um um^-2"
    assert unit_of("barcode_total_persistence_sd", "um") == "um"
    assert unit_of("paths_3_edges") == "1"
    assert unit_of("not a key") is None
    assert all(m.description and m.kind in KINDS for m in MEASURES.values())
    assert main(["phantom", "ring2d", "--out", str(tmp_path / "r.tif")]) == 0
    assert main(["analyze", str(tmp_path / "r.tif"), "--unit", "mm", "-q", "-o",
                 str(tmp_path / "o"), "--measures", "vessel"]) == 0
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert s["units"]["length_density"] == "mm mm^-2"
    assert s["units"]["total_length"] == "mm"
