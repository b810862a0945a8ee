"""Cohorts: manifests, cached resumable batch runs (local and Dask), group comparison."""

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from skelmorph.cli import main
from skelmorph.cohort.compare import classify, cluster_ari, compare_cohort, learn_weights
from skelmorph.cohort.manifest import ManifestError, read_manifest
from skelmorph.cohort.run import load_options, run_cohort
from skelmorph.cohort.stats import benjamini_hochberg, compare_groups
from skelmorph.errors import SkelmorphError
from skelmorph.io import write_tiff
from skelmorph.phantoms import foam

FAST = {"n_radii": 20, "figures": False}
GROUPS = {"intact": dict(rod_radius=2.6, break_fraction=0.0),
          "eroded": dict(rod_radius=1.9, break_fraction=0.15)}


def make_study(folder, per_group=6, size=40.0, groups=GROUPS, seed0=0):
    folder.mkdir(parents=True, exist_ok=True)
    lines = ["sample,path,group,spacing"]
    seed = seed0
    for g, params in groups.items():
        for i in range(per_group):
            seed += 1
            ph = foam(size=size, cell=12.0, seed=seed, **params)
            write_tiff(folder / f"{g}{i}.tif", ph.mask, ph.spacing)
            lines.append(f"{g}{i},{g}{i}.tif,{g},1.0")
    (folder / "manifest.csv").write_text("\n".join(lines) + "\n")
    return folder / "manifest.csv"


# ------------------------------------------------------------------ manifest
def test_manifest_reports_every_bad_row(tmp_path):
    (tmp_path / "a.tif").write_bytes(b"x")
    (tmp_path / "m.csv").write_text(
        "sample,path,group,spacing\n"
        "a,a.tif,x,1\n"
        "a,a.tif,x,1\n"           # duplicate id
        "b,missing.tif,x,1\n"     # missing file
        "c,a.tif,x,-2\n"          # bad spacing
        ",a.tif,x,1\n"            # empty id
        "d e,a.tif,x,1\n")        # bad id
    with pytest.raises(ManifestError) as err:
        read_manifest(tmp_path / "m.csv")
    msg = str(err.value)
    assert "5 problem(s)" in msg
    for part in ("duplicate sample id 'a'", "missing.tif does not exist", "bad spacing '-2'",
                 "line 6: empty sample id", "'d e' may only use"):
        assert part in msg
    (tmp_path / "n.csv").write_text("id,file\nx,a.tif\n")
    with pytest.raises(ManifestError, match="lacks the column"):
        read_manifest(tmp_path / "n.csv")
    good = tmp_path / "g.csv"
    good.write_text("sample,path,spacing,unit,age\ns1,a.tif,2 1 1,mm,12\n")
    (s,) = read_manifest(good)
    assert s.spacing == (2.0, 1.0, 1.0) and s.unit == "mm" and s.meta == {"age": "12"}


def test_options_file(tmp_path):
    (tmp_path / "o.toml").write_text('[analyze]\nn_radii = 10\nmeasures = ["bone"]\n')
    assert load_options(tmp_path / "o.toml") == {"n_radii": 10, "measures": ["bone"]}
    (tmp_path / "bad.toml").write_text("radius = 3\n")
    with pytest.raises(SkelmorphError, match="unknown option"):
        load_options(tmp_path / "bad.toml")
    (tmp_path / "broken.toml").write_text("n_radii = \n")
    with pytest.raises(SkelmorphError, match="not valid TOML"):
        load_options(tmp_path / "broken.toml")


# ---------------------------------------------------------------- batch runs
def test_run_cache_failure_and_tables(tmp_path):
    manifest = make_study(tmp_path / "data", per_group=2)
    out = tmp_path / "study"
    rep = run_cohort(manifest, out, FAST, progress=False)
    assert len(rep.computed) == 4 and not rep.failed
    first = {s: json.loads((out / "samples" / s / "done.json").read_text())["finished"]
             for s in rep.computed}
    again = run_cohort(manifest, out, FAST, progress=False)
    assert again.computed == [] and sorted(again.cached) == sorted(first)
    # Changed options recompute; a corrupt input is recorded and the rest goes on.
    (tmp_path / "data" / "eroded1.tif").write_bytes(b"II*\x00 this is not an image")
    rep = run_cohort(manifest, out, {**FAST, "n_radii": 15}, workers=2, progress=False)
    assert set(rep.failed) == {"eroded1"} and len(rep.computed) == 3
    failures = (out / "failures.csv").read_text()
    assert "eroded1" in failures and "TIFF" in failures or "read" in failures
    cohort = (out / "cohort.csv").read_text().splitlines()
    assert cohort[0].startswith("sample,group,path,spacing") and len(cohort) == 5
    assert "total_length" in cohort[0]
    assert len((out / "profiles.csv").read_text().splitlines()) > 1
    assert not list((out / "samples").glob(".*"))  # no temporary folders left


def test_killed_run_resumes_without_recomputing(tmp_path):
    manifest = make_study(tmp_path / "data", per_group=3, size=56.0)
    out = tmp_path / "study"
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    proc = subprocess.Popen([sys.executable, "-m", "skelmorph.cli", "cohort", "run",
                             str(manifest), "--out", str(out), "--quiet"], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    deadline = time.time() + 120
    while time.time() < deadline and len(list((out / "samples").glob("*/done.json"))) < 2:
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    done = {p.parent.name: json.loads(p.read_text())["finished"]
            for p in (out / "samples").glob("*/done.json")}
    assert 2 <= len(done) < 6, "the run should be killed midway"
    rep = run_cohort(manifest, out, progress=False)
    assert set(done) <= set(rep.cached)
    assert len(rep.cached) + len(rep.computed) == 6 and not rep.failed
    for s, finished in done.items():
        assert json.loads((out / "samples" / s / "done.json").read_text())["finished"] == finished


def test_dask_local_cluster(tmp_path):
    distributed = pytest.importorskip("distributed")
    manifest = make_study(tmp_path / "data", per_group=1)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        rep = run_cohort(manifest, tmp_path / "study", FAST, scheduler=cluster.scheduler_address,
                         progress=False)
    assert len(rep.computed) == 2 and not rep.failed


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.slow
def test_dask_scheduler_and_worker_processes(tmp_path):
    """Real 'dask scheduler' and 'dask worker' processes on loopback."""
    pytest.importorskip("distributed")
    dask_cli = shutil.which("dask") or str(Path(sys.executable).with_name("dask"))
    if not Path(dask_cli).exists():
        pytest.skip("the dask command is not installed")
    manifest = make_study(tmp_path / "data", per_group=1)
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    procs = [subprocess.Popen([dask_cli, "scheduler", "--host", "127.0.0.1", "--port", str(port),
                               "--dashboard-address", ":0"], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL)]
    try:
        time.sleep(1.0)
        procs.append(subprocess.Popen([dask_cli, "worker", address, "--nworkers", "1",
                                       "--nthreads", "1", "--dashboard-address", ":0"],
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        from distributed import Client
        with Client(address, timeout=60) as client:
            client.wait_for_workers(1, timeout=60)
            rep = run_cohort(manifest, tmp_path / "study", FAST, scheduler=client, progress=False)
        assert len(rep.computed) == 2 and not rep.failed
    finally:
        for p in procs[::-1]:
            p.terminate()
            p.wait(timeout=30)


# ---------------------------------------------------------------- comparison
@pytest.fixture(scope="module")
def separable(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("separable")
    manifest = make_study(tmp / "data", per_group=6, size=48.0)
    run_cohort(manifest, tmp / "study", {"n_radii": 30, "figures": False, "measures": ["bone"]},
               workers=2, progress=False)
    return tmp / "study"


@pytest.mark.slow
def test_separable_cohort(separable):
    """Two generators differing in strut thickness and connectivity: the
    groups are told apart and the thickness / connectivity measures differ."""
    res = compare_cohort(separable, n_repeats=5, n_permutations=50)
    assert res["n_samples"] == 12 and res["groups"] == {"eroded": 6, "intact": 6}
    assert res["cv_accuracy"] >= 0.9
    assert res["permutation_p"] < 0.05
    for key in ("Tb.Th", "mean_radius", "Conn.D"):
        assert key in res["significant_measures"], key
    assert abs(sum(res["weights"].values()) - 1) < 1e-9
    saved = json.loads((separable / "comparison.json").read_text())
    for key in ("n_samples", "groups", "cv_accuracy", "cv_accuracy_sd", "permutation_p",
                "weights", "significant_measures"):
        assert key in saved
    for fig in ("measures", "profiles", "distances", "embeddings"):
        assert (separable / "figures" / f"{fig}.png").stat().st_size > 1000


@pytest.mark.slow
def test_null_cohort(tmp_path):
    """One generator, random labels, 10 repeats: no measure is significant
    after FDR in at least 9 of 10, and accuracy stays in the chance band."""
    manifest = make_study(tmp_path / "data", per_group=6, size=40.0,
                          groups={"same": GROUPS["intact"]})
    study = tmp_path / "study"
    run_cohort(manifest, study, FAST, workers=2, progress=False)
    cohort_csv = study / "cohort.csv"
    original = cohort_csv.read_text().splitlines()
    rng = np.random.default_rng(7)
    clean, accuracies = 0, []
    for repeat in range(10):
        labels = rng.permutation(["a"] * 3 + ["b"] * 3)
        rows = [original[0]] + [line.replace(",same,", f",{lab},", 1)
                                for line, lab in zip(original[1:], labels)]
        cohort_csv.write_text("\n".join(rows) + "\n")
        res = compare_cohort(study, out=tmp_path / f"cmp{repeat}", n_repeats=3,
                             n_permutations=10, figures=False)
        clean += not res["significant_measures"]
        accuracies.append(res["cv_accuracy"])
    assert clean >= 9
    # Chance is 0.5; with 6 samples the 95 % binomial band of a mean over 10
    # repeats is wide, so check the mean is not far above it (common practice).
    assert np.mean(accuracies) < 0.8


def test_statistics_against_scipy_and_sklearn():
    rng = np.random.default_rng(3)
    p = rng.uniform(0, 0.2, 30)
    np.testing.assert_allclose(benjamini_hochberg(p), stats.false_discovery_control(p), rtol=1e-12)
    a, b, c = rng.normal(0, 1, 8), rng.normal(1, 1, 9), rng.normal(2, 1, 7)
    r = compare_groups(np.concatenate([a, b]), ["x"] * 8 + ["y"] * 9)
    ref = stats.mannwhitneyu(a, b, alternative="two-sided")
    assert r["p"] == pytest.approx(ref.pvalue) and r["statistic"] == ref.statistic
    assert r["effect_size"] == pytest.approx(2 * ref.statistic / 72 - 1)
    r3 = compare_groups(np.concatenate([a, b, c]), ["x"] * 8 + ["y"] * 9 + ["z"] * 7)
    assert r3["p"] == pytest.approx(stats.kruskal(a, b, c).pvalue)
    # ARI against scikit-learn on two well separated blobs.
    from scipy.spatial.distance import pdist, squareform
    from sklearn.metrics import adjusted_rand_score
    pts = np.vstack([rng.normal(0, 0.1, (5, 2)), rng.normal(5, 0.1, (5, 2))])
    lab = np.array(["p"] * 5 + ["q"] * 5)
    assert cluster_ari(squareform(pdist(pts)), lab) == adjusted_rand_score(lab, lab) == 1.0


def test_nca_weights_and_learned_weights():
    """NCA per-feature weights: diag(A^T A) of scikit-learn's fitted
    components; the informative feature dominates.  Learned descriptor
    weights go to the descriptor that separates the groups."""
    from scipy.spatial.distance import pdist, squareform
    from sklearn.neighbors import NeighborhoodComponentsAnalysis
    from sklearn.preprocessing import StandardScaler

    from skelmorph.cohort.compare import nca_feature_weights
    rng = np.random.default_rng(0)
    y = np.array([0] * 10 + [1] * 10)
    X = np.column_stack([y * 3 + rng.normal(0, 0.5, 20), rng.normal(0, 1, 20), rng.normal(0, 1, 20)])
    w, _ = nca_feature_weights(X, y, ["signal", "noise1", "noise2"])
    ref = NeighborhoodComponentsAnalysis(random_state=0, max_iter=50).fit(
        StandardScaler().fit_transform(X), y)
    diag = np.sum(ref.components_ ** 2, axis=0)
    np.testing.assert_allclose([w["signal"], w["noise1"], w["noise2"]], diag / diag.sum())
    assert max(w, key=w.get) == "signal"
    d = {"good": squareform(pdist(X[:, :1])), "bad": squareform(pdist(X[:, 1:]))}
    weights, index, single = learn_weights(d, y)
    assert weights["good"] > 0.8 and index >= single["good"] - 1e-12
    acc = classify(X, y, n_repeats=3, n_permutations=20)
    assert acc["cv_accuracy"] > 0.9 and acc["permutation_p"] < 0.1


def test_cohort_cli(tmp_path, capsys):
    manifest = make_study(tmp_path / "data", per_group=3, size=36.0)
    (tmp_path / "o.toml").write_text("n_radii = 10\nfigures = false\npaths = 3\n")
    assert main(["cohort", "run", str(manifest), "--out", str(tmp_path / "s"), "--quiet",
                 "--options", str(tmp_path / "o.toml"), "--workers", "2"]) == 0
    assert "6 analysed, 0 reused, 0 failed" in capsys.readouterr().out
    assert main(["cohort", "compare", str(tmp_path / "s"), "--permutations", "10",
                 "--repeats", "2"]) == 0
    out = capsys.readouterr().out
    assert "6 samples in groups eroded (n=3), intact (n=3)" in out and "not a diagnosis" in out
    # Path counts plug in as one more descriptor with its own distance.
    comp = json.loads((tmp_path / "s" / "comparison.json").read_text())
    assert "paths" in comp["weights"] and "paths_3_edges" in comp["measures"]
    (tmp_path / "bad.csv").write_text("sample,path\nx,nope.tif\ny,nope2.tif\n")
    assert main(["cohort", "run", str(tmp_path / "bad.csv"), "--out", str(tmp_path / "b")]) == 2
    err = capsys.readouterr().err
    assert "2 problem(s)" in err and "nope2.tif" in err


def test_failure_messages_with_commas_stay_one_field(tmp_path):
    """failures.csv is read back by the csv module (general-purpose reference):
    a message with commas and quotes is one field."""
    import csv

    from skelmorph.io import write_csv
    write_csv(tmp_path / "f.csv", {"sample": ["a"], "error": ['bad, very "bad", file']})
    with open(tmp_path / "f.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert rows == [{"sample": "a", "error": 'bad, very "bad", file'}]


def test_design_notes_for_small_groups():
    # Exact two-sided rank test bound 2 / C(n1 + n2, n1) (Mann & Whitney 1947):
    # groups of 3 and 3 reach at best p = 0.1 > 0.05; 1 sample in a group is
    # flagged; 8 and 8 can reach significance.
    from skelmorph.cohort.compare import design_notes
    notes = design_notes([3, 3], 0.05)
    assert len(notes) == 1 and "0.1" in notes[0]
    notes = design_notes([1, 5], 0.05)
    assert any("fewer than 3" in n for n in notes) and any("0.333" in n for n in notes)
    assert design_notes([8, 8], 0.05) == []


def test_degenerate_groups_warn_and_report_nan(tmp_path):
    """A group of one sample: the comparison finishes, warns about the design,
    and reports NaN (not -inf) where an index cannot be computed."""
    import pandas as pd
    rng = np.random.default_rng(0)
    n = 6
    pd.DataFrame({"sample": [f"s{i}" for i in range(n)], "group": ["a"] + ["b"] * (n - 1),
                  "path": "x.tif", "spacing": "1 1 1", "unit": "um", "ndim": 3,
                  "total_length": rng.gamma(5, 100, n), "mean_radius": rng.gamma(4, 1, n),
                  "cycle_rank": rng.poisson(30, n)}).to_csv(tmp_path / "cohort.csv", index=False)
    with pytest.warns(UserWarning, match="fewer than 3 samples"):
        res = compare_cohort(tmp_path, n_repeats=2, n_permutations=5, figures=False)
    assert any("smallest attainable p-value" in note for note in res["notes"])
    assert np.isnan(res["cv_accuracy"])
    assert not np.isneginf(res["separation_index"]["value"])
    saved = json.loads((tmp_path / "comparison.json").read_text())
    assert saved["notes"] == res["notes"]
    assert (tmp_path / "measures.csv").read_text().splitlines()[0].startswith("measure,unit,")


def test_measures_undefined_in_many_samples_stay_out_of_the_classifier():
    # A plate thickness is undefined (NaN) where a sample has no plates;
    # median imputation would invent it, so such a column is left out when
    # more than a quarter of the samples lack it; a rare gap is imputed.
    import pandas as pd

    from skelmorph.cohort.models import feature_matrix
    cohort = pd.DataFrame({"sample": list("abcdefgh"), "group": ["x"] * 4 + ["y"] * 4,
                           "Tb.Th": np.arange(8.0),
                           "pTb.Th": [1.0, 2.0, 3.0, 4.0] + [np.nan] * 4,
                           "Tb.Sp": [np.nan] + list(np.arange(7.0))})
    X, names = feature_matrix({"cohort": cohort, "profiles": None, "barcodes": None})
    assert names == ["Tb.Th", "Tb.Sp"] and X.shape == (8, 2)
