"""Graph exports, the results folder and the command line."""

import json
import re
import subprocess
import sys

import networkx as nx
import numpy as np
import pytest

import skelmorph as sm
from skelmorph import phantoms as ph
from skelmorph.cli import main
from skelmorph.graph import SkeletonGraph
from skelmorph.io import write_tiff


@pytest.fixture(scope="module")
def frame_graph():
    p = ph.wire_frame(n_nodes=2)
    return sm.skeleton_graph(p.mask, p.spacing, unit="um")


def test_graphml_read_by_networkx(frame_graph, tmp_path):
    frame_graph.write(tmp_path / "g.graphml")
    G = nx.read_graphml(tmp_path / "g.graphml")
    assert G.number_of_nodes() == 8 and G.number_of_edges() == 12
    # networkx (reference): the cube graph Q3 has 384 spanning trees.
    assert round(nx.number_of_spanning_trees(nx.Graph(G))) == 384
    total = sum(d["length"] for _, _, d in G.edges(data=True))
    assert total == pytest.approx(frame_graph.edge_length.sum(), rel=1e-5)


def test_vtp_read_by_pyvista(frame_graph, tmp_path):
    pv = pytest.importorskip("pyvista")
    frame_graph.write(tmp_path / "g.vtp")
    poly = pv.read(tmp_path / "g.vtp")
    assert poly.n_points == len(frame_graph.points)
    assert poly.n_lines == frame_graph.n_edges
    np.testing.assert_allclose(poly.point_data["radius"], frame_graph.point_radius, rtol=1e-5)
    np.testing.assert_allclose(poly.points[:, ::-1], frame_graph.points, rtol=1e-5, atol=1e-4)
    mem = frame_graph.to_vtk()
    assert mem.n_lines == frame_graph.n_edges


@pytest.mark.parametrize("suffix", [".json", ".npz"])
def test_roundtrip(frame_graph, tmp_path, suffix):
    frame_graph.write(tmp_path / f"g{suffix}")
    g = SkeletonGraph.read(tmp_path / f"g{suffix}")
    for name in SkeletonGraph._ARRAYS:
        np.testing.assert_allclose(getattr(g, name), getattr(frame_graph, name))
    assert g.spacing == frame_graph.spacing and g.unit == "um" and g.meta == frame_graph.meta


def test_unknown_format(frame_graph, tmp_path):
    with pytest.raises(sm.SkelmorphError, match="unknown graph format"):
        frame_graph.write(tmp_path / "g.xyz")


def test_cli_analyze_writes_results(tmp_path, capsys):
    p = ph.y_bifurcation(spacing=(2.0, 1.0, 1.0))
    write_tiff(tmp_path / "y.tif", p.mask, p.spacing)
    assert main(["analyze", str(tmp_path / "y.tif"), "--out", str(tmp_path / "r")]) == 0
    out = capsys.readouterr().out
    assert re.search(r"n_junctions +1 ", out) and re.search(r"n_tips +3 ", out)
    assert re.search(r"total_length +[\d,.]+ um ", out) and "not a diagnosis" in out
    for name in ("graph.graphml", "graph.vtp", "nodes.csv", "branches.csv", "summary.json"):
        assert (tmp_path / "r" / name).stat().st_size > 0
    summary = json.loads((tmp_path / "r" / "summary.json").read_text())
    for key in ("total_length", "n_nodes", "n_branches", "n_junctions", "n_tips", "n_components",
                "cycle_rank", "spacing", "unit", "skelmorph_version"):
        assert key in summary
    assert summary["spacing"] == [2.0, 1.0, 1.0] and summary["unit"] == "um"
    rows = (tmp_path / "r" / "branches.csv").read_text().splitlines()
    assert rows[0].split(",") == ["branch", "node_a", "node_b", "length", "chord", "tortuosity",
                                  "radius_mean", "radius_min", "radius_max", "radius_equivalent",
                                  "kind"]
    assert len(rows) == 4 and all(r.endswith("terminal") for r in rows[1:])


def test_cli_spacing_option(tmp_path, capsys):
    np.save(tmp_path / "m.npy", ph.torus().mask)
    assert main(["analyze", str(tmp_path / "m.npy"), "--spacing", "0.5", "--unit", "mm",
                 "--out", str(tmp_path / "r")]) == 0
    s = json.loads((tmp_path / "r" / "summary.json").read_text())
    assert s["unit"] == "mm" and s["total_length"] == pytest.approx(np.pi * 30, rel=0.02)


@pytest.mark.parametrize("args,message", [
    (["analyze", "/no/such/file.tif"], "no such file"),
    (["analyze", "IMG", "--spacing", "0", "1", "1"], "spacing"),
])
def test_cli_bad_input_exit_2_one_line(tmp_path, capsys, args, message):
    np.save(tmp_path / "m.npy", ph.torus().mask)
    args = [str(tmp_path / "m.npy") if a == "IMG" else a for a in args]
    assert main(args + ["--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("skelmorph: error:") and message in err[0]


def test_cli_empty_image_exit_2(tmp_path, capsys):
    np.save(tmp_path / "e.npy", np.zeros((10, 10, 10), np.uint8))
    assert main(["analyze", str(tmp_path / "e.npy"), "--spacing", "1"]) == 2
    assert "empty" in capsys.readouterr().err


def test_cli_phantom(tmp_path):
    assert main(["phantom", "lattice", "--out", str(tmp_path / "lat.tif")]) == 0
    truth = json.loads((tmp_path / "lat.json").read_text())
    assert truth["truth"]["cycle_rank"] == 28
    arr, spacing, _ = sm.read_image(tmp_path / "lat.tif")
    assert arr.shape == tuple(truth["shape"])


def test_console_script_runs_as_module(tmp_path):
    r = subprocess.run([sys.executable, "-m", "skelmorph.cli", "analyze", str(tmp_path / "x.tif")],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "Traceback" not in r.stderr


@pytest.mark.slow
def test_demo(tmp_path, capsys):
    """The demo study: thinner, partly broken struts in the bathed group are
    found (Tb.Th and the number of loops lower) and the groups are told
    apart; the page is written."""
    assert main(["demo", str(tmp_path / "d"), "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "fresh" in out and "bathed" in out and "not a diagnosis" in out
    assert "cross-validated accuracy" in out
    cohort = (tmp_path / "d" / "study" / "cohort.csv").read_text().splitlines()
    assert len(cohort) == 17
    comp = json.loads((tmp_path / "d" / "study" / "comparison.json").read_text())
    assert comp["cv_accuracy"] >= 0.9 and comp["permutation_p"] < 0.05
    assert (tmp_path / "d" / "study" / "report.html").exists()
    for key in ("Tb.Th", "cycle_rank"):
        assert key in comp["significant_measures"]
        groups = comp["measures"][key]["groups"]
        assert groups["bathed"]["mean"] < groups["fresh"]["mean"]


def test_cli_tree_descriptors(tmp_path, capsys):
    """--tree random --n-trees 3: barcode.csv holds 3 trees; scalars get a spread;
    bar count per tree = tips + 2 x loops of the frame (each cut makes two tips)."""
    import csv
    assert main(["phantom", "frame", "--out", str(tmp_path / "f.tif")]) == 0
    out = tmp_path / "r"
    assert main(["analyze", str(tmp_path / "f.tif"), "--out", str(out), "--quiet",
                 "--tree", "random", "--n-trees", "3", "--root", "center", "--filtration", "path"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["n_trees"] == 3 and summary["tree_method"] == "random"
    assert summary["barcode_n_bars"] == 2 * summary["cycle_rank"] + summary["n_tips"]
    assert "barcode_total_persistence_sd" in summary
    # For the path filtration the bars add up to the total length (design section 4).
    assert summary["barcode_total_persistence"] == pytest.approx(summary["total_length"])
    with open(out / "barcode.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert sorted({r["tree"] for r in rows}) == ["0", "1", "2"]
    assert (out / "barcode.png").stat().st_size > 1000
    assert "barcode" in capsys.readouterr().out
    assert main(["analyze", str(tmp_path / "f.tif"), "--out", str(tmp_path / "n"), "--quiet",
                 "--tree", "none"]) == 0
    assert not (tmp_path / "n" / "barcode.csv").exists()


def test_cli_profiles(tmp_path):
    """analyze writes profiles.csv (one row per radius, every column) and
    profiles.png; the summary holds the maximum crossings of the profile."""
    import csv

    from skelmorph.descriptors.radial import PROFILE_COLUMNS
    assert main(["phantom", "y", "--out", str(tmp_path / "y.tif")]) == 0
    out = tmp_path / "r"
    assert main(["analyze", str(tmp_path / "y.tif"), "--out", str(out), "--quiet",
                 "--n-radii", "40"]) == 0
    with open(out / "profiles.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 40 and list(rows[0]) == list(PROFILE_COLUMNS)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["profile_max_crossings"] == max(float(r["crossings"]) for r in rows)
    assert (out / "profiles.png").stat().st_size > 1000
    assert main(["analyze", str(tmp_path / "y.tif"), "--out", str(tmp_path / "n"), "--quiet",
                 "--n-radii", "0"]) == 0
    assert not (tmp_path / "n" / "profiles.csv").exists()
