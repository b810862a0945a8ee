"""Nothing lost, nothing silently wrong: cache integrity, locks, exit codes,
resource limits, signals, label images, thin axes, unit changes, options
and one-line errors.  Signals and locks are tested on the real command line
in subprocesses."""

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

import skelmorph as sm
from skelmorph.cli import main
from skelmorph.cohort.compare import compare_cohort
from skelmorph.cohort.run import run_cohort, study_lock
from skelmorph.io import read_image, safe_cell, write_csv, write_tiff


def _err_lines(capsys):
    return [line for line in capsys.readouterr().err.strip().splitlines()
            if line.startswith("skelmorph") and "error" in line]


def _one_line_error(capsys, fragment):
    lines = _err_lines(capsys)
    assert len(lines) == 1, lines
    assert fragment in lines[0], lines[0]


@pytest.fixture
def small_study(tmp_path):
    """Three tiny samples (a tree and two lattices) and their manifest."""
    files = []
    for i, name in enumerate(("tree", "lattice", "lattice")):
        kw = {"seed": i} if name == "tree" else {"n_cells": 2}
        ph = sm.phantoms.make(name, **kw)
        f = tmp_path / f"s{i}.tif"
        write_tiff(f, ph.mask.astype(np.uint8), ph.spacing, ph.unit)
        files.append(f)
    man = tmp_path / "m.csv"
    man.write_text("sample,path,group\n" + "".join(
        f"s{i},{f.name},{'ab'[i % 2]}\n" for i, f in enumerate(files)))
    return man, tmp_path / "study"


OPTS = {"tree": None, "n_radii": 0}


def _rows(study, name):
    import csv
    with open(study / name, newline="") as fh:
        return list(csv.DictReader(fh))


# ------------------------------------------------------------ cache integrity

def test_damaged_cache_is_recomputed_and_every_row_is_accounted_for(small_study):
    man, study = small_study
    rep = run_cohort(man, study, options=OPTS, progress=False)
    assert sorted(rep.computed) == ["s0", "s1", "s2"]
    summary = study / "samples" / "s1" / "summary.json"
    summary.write_text(summary.read_text()[:40])  # truncated
    with pytest.warns(UserWarning, match="s1: cached results are damaged"):
        rep = run_cohort(man, study, options=OPTS, progress=False)
    assert rep.computed == ["s1"] and "s1" in rep.repaired
    assert sorted(rep.cached) == ["s0", "s2"]
    assert json.loads(summary.read_text())["n_branches"] > 0
    # A sample folder lost behind the run's back: reported, never dropped.
    (study / "samples" / "s2" / "done.json").unlink()
    rep = run_cohort(man, study, options=OPTS, progress=False)
    assert rep.computed == ["s2"]
    ids = {r["sample"] for r in _rows(study, "cohort.csv")} | {
        r["sample"] for r in _rows(study, "failures.csv")}
    assert ids == {"s0", "s1", "s2"}


def test_failed_samples_exit_3_and_tables_are_written(small_study, capsys):
    man, study = small_study
    bad = man.parent / "bad.tif"
    bad.write_bytes(b"II*\x00 not really a tiff")
    man.write_text(man.read_text() + "s3,bad.tif,b\n")
    code = main(["cohort", "run", str(man), "--out", str(study), "-q"])
    assert code == 3
    assert {r["sample"] for r in _rows(study, "failures.csv")} == {"s3"}
    assert len(_rows(study, "cohort.csv")) == 3


def test_a_second_run_on_a_locked_study_exits_2(small_study):
    man, study = small_study
    study.mkdir(parents=True)
    holder = subprocess.Popen(
        [sys.executable, "-c",
         "import sys, time; from skelmorph.cohort.run import study_lock\n"
         f"with study_lock({str(study)!r}):\n    print('held', flush=True); time.sleep(30)"],
        stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        run = subprocess.run([sys.executable, "-m", "skelmorph.cli", "cohort", "run", str(man),
                              "--out", str(study), "-q"], capture_output=True, text=True,
                             timeout=120)
        assert run.returncode == 2
        errors = [line for line in run.stderr.splitlines() if "error" in line]
        assert len(errors) == 1 and "in use by another run" in errors[0]
    finally:
        holder.kill()
        holder.wait()
    with study_lock(study):  # released with its holder
        pass


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_stopping_the_run_stops_its_workers(tmp_path, sig):
    # Six samples of a few seconds each, two workers; SIGTERM after the first
    # finishes: exit 143 within seconds, tables written, no worker left.
    # kill -9 of the parent: the workers die with it.
    files = []
    for i in range(6):
        ph = sm.phantoms.make("foam", size=72, cell=12, rod_radius=2.0, seed=i)
        f = tmp_path / f"f{i}.tif"
        write_tiff(f, ph.mask.astype(np.uint8), ph.spacing)
        files.append(f)
    man = tmp_path / "m.csv"
    man.write_text("sample,path\n" + "".join(f"f{i},{f.name}\n" for i, f in enumerate(files)))
    study = tmp_path / "study"
    proc = subprocess.Popen([sys.executable, "-m", "skelmorph.cli", "cohort", "run", str(man),
                             "--out", str(study), "--workers", "2", "-q"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 240
    while time.time() < deadline and not any((study / "samples").glob("f*/done.json")):
        time.sleep(0.2)
    assert proc.poll() is None, "the run ended before it could be interrupted"
    t0 = time.time()
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=60)
    if sig == signal.SIGTERM:
        assert proc.returncode == 143, err
        assert time.time() - t0 < 30
        assert (study / "cohort.csv").exists()
    else:
        assert proc.returncode == -signal.SIGKILL
    time.sleep(1.5)
    alive = []
    for pid in os.listdir("/proc"):
        if pid.isdigit():
            try:
                with open(f"/proc/{pid}/cmdline", "rb") as fh:
                    if str(study).encode() in fh.read():
                        alive.append(pid)
            except OSError:
                pass
    assert not alive
    done = [p.parent.name for p in (study / "samples").glob("f*/done.json")]
    assert 1 <= len(done) < 6
    if sig == signal.SIGKILL:  # the next run cleans up and finishes the rest
        rerun = subprocess.run([sys.executable, "-m", "skelmorph.cli", "cohort", "run", str(man),
                                "--out", str(study), "-q"], capture_output=True, text=True,
                               timeout=600)
        assert rerun.returncode == 0, rerun.stderr
        assert not list((study / "samples").glob(".*"))
        assert len(_rows(study, "cohort.csv")) == 6


# ------------------------------------------------------------------ resources

def _tiff_declaring(path, height, width):
    """An 8x8 uncompressed TIFF whose header then claims height x width."""
    import tifffile
    tifffile.imwrite(path, np.zeros((8, 8), np.uint8))
    data = bytearray(path.read_bytes())
    assert data[:2] == b"II"
    ifd = int.from_bytes(data[4:8], "little")
    for k in range(int.from_bytes(data[ifd:ifd + 2], "little")):
        e = ifd + 2 + 12 * k
        tag, kind = int.from_bytes(data[e:e + 2], "little"), int.from_bytes(data[e + 2:e + 4], "little")
        value = {256: width, 257: height}.get(tag)
        if value is not None:
            size = 2 if kind == 3 else 4
            data[e + 8:e + 8 + size] = value.to_bytes(size, "little")
    path.write_bytes(bytes(data))


def test_huge_declared_tiff_is_refused_before_decoding(tmp_path, capsys):
    # The header (a few bytes) claims 60000 x 60000: refused from the header,
    # with the memory it would need, without allocating it.
    f = tmp_path / "huge.tif"
    _tiff_declaring(f, 60000, 60000)
    assert f.stat().st_size < 1000
    assert main(["analyze", str(f), "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "declares")


def test_huge_declared_npy_is_refused(tmp_path, capsys):
    f = tmp_path / "huge.npy"
    with open(f, "wb") as fh:
        np.lib.format.write_array_header_1_0(
            fh, {"descr": "|u1", "fortran_order": False, "shape": (200000, 200000, 50)})
    assert main(["analyze", str(f), "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "declares")


def test_devices_and_pipes_are_refused(tmp_path, capsys):
    assert main(["analyze", "/dev/zero", "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "not a regular file")
    fifo = tmp_path / "pipe.tif"
    os.mkfifo(fifo)
    assert main(["analyze", str(fifo), "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "not a regular file")


def test_workers_are_capped_at_the_cores(small_study):
    man, study = small_study
    cores = len(os.sched_getaffinity(0))
    with pytest.warns(UserWarning, match="more than the"):
        run_cohort(man, study, options=OPTS, workers=cores + 62, progress=False)
    assert json.loads((study / "run.json").read_text())["workers"] == cores


def test_runaway_descriptor_requests_are_refused_with_an_estimate(tmp_path, capsys):
    ph = sm.phantoms.make("foam", size=64, cell=14, rod_radius=2.0)
    with pytest.raises(sm.SkelmorphError, match="would need about .* GiB"):
        sm.analyze(ph.mask, tree="random", n_trees=100000, n_radii=0)
    with pytest.raises(sm.SkelmorphError, match="would take about"):
        sm.analyze(ph.mask, tree=None, n_radii=1_000_000, work_limit=1)
    with pytest.raises(sm.SkelmorphError, match="simple paths"):
        sm.analyze(ph.mask, tree=None, n_radii=0, paths=40)
    f = tmp_path / "foam.npy"
    np.save(f, ph.mask)
    assert main(["analyze", str(f), "--n-radii", "1000000000", "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "n_radii must be between")
    with pytest.raises(SystemExit) as stop:  # argparse's own check, in one line too
        main(["analyze", str(f), "--n-radii", "1e9", "-q", "-o", str(tmp_path / "o")])
    assert stop.value.code == 2
    _one_line_error(capsys, "invalid int value")
    # The limit is an option: a larger one lets the same request through.
    r = sm.analyze(ph.mask, tree=None, n_radii=0, paths=6, max_paths=10**9)
    assert r.paths["k"] == 6


# ------------------------------------------------------- silently wrong numbers

def test_label_images_need_a_label(tmp_path, capsys):
    lab = np.zeros((60, 80), np.uint8)
    for value, row in zip(range(1, 6), range(5, 55, 10)):
        lab[row:row + 4, 5:75] = value
    f = tmp_path / "labels.npy"
    np.save(f, lab)
    assert main(["analyze", str(f), "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "label map")
    assert main(["analyze", str(f), "--label", "3", "--n-radii", "0", "-q", "-o",
                 str(tmp_path / "o")]) == 0
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert s["n_components"] == 1 and s["preprocessing"][0] == {"step": "label", "value": 3}


def test_a_thin_3d_image_stays_3d(tmp_path):
    # Shape (40, 1, 60), voxel (2, 1, 0.5): an L of 30 voxels along z and 36
    # along x.  Analytic centreline length 29 x 2 + 35 x 0.5 = 75.5; the
    # thinned, smoothed graph is within 5 % of it (the corner is cut), and
    # equals the graph of the same L as a 2D image with voxel (2, 0.5).
    m = np.zeros((40, 1, 60), np.uint8)
    m[5:35, 0, 10] = 1
    m[34, 0, 10:46] = 1
    f = tmp_path / "thin.tif"
    write_tiff(f, m, (2.0, 1.0, 0.5))
    image = read_image(f)
    assert image.array.shape == (40, 1, 60) and image.spacing == (2.0, 1.0, 0.5)
    s = sm.analyze(image, tree=None, n_radii=0).summary
    assert len(s["image_shape"]) == 3
    assert s["total_length"] == pytest.approx(75.5, rel=0.05)
    flat = sm.analyze(m[:, 0, :], (2.0, 0.5), tree=None, n_radii=0).summary
    assert s["total_length"] == pytest.approx(flat["total_length"], rel=1e-9)


def test_one_voxel_image_gives_one_line(tmp_path, capsys):
    f = tmp_path / "one.npy"
    np.save(f, np.ones((1, 1, 1), np.uint8))
    assert main(["analyze", str(f), "-q", "-o", str(tmp_path / "o")]) == 2
    lines = _err_lines(capsys)
    assert len(lines) == 1 and "0 dimensions" not in lines[0]


@pytest.mark.parametrize("k", [-12, -6, -1, 3, 6])
def test_results_scale_with_the_unit(k):
    # Scale equivariance (dimensional analysis): multiplying the voxel size by
    # 10^k multiplies lengths by 10^k, length density by 10^-2k, and leaves
    # counts and exponents alone, to 1e-9 relative.
    ph = sm.phantoms.make("tree", seed=1)
    base = sm.analyze(ph.mask, ph.spacing, measures="vessel").summary
    f = 10.0 ** k
    s = sm.analyze(ph.mask, tuple(np.asarray(ph.spacing) * f), measures="vessel").summary
    for key, power in (("total_length", 1), ("mean_radius", 1), ("barcode_total_persistence", 1),
                       ("length_density", -2), ("murray_exponent", 0), ("n_branches", 0),
                       ("cycle_rank", 0), ("profile_max_crossings", 0)):
        assert s[key] == pytest.approx(base[key] * f ** power, rel=1e-9), key


@pytest.mark.parametrize("spacing", ["1e308", "1e-308", "1e-20"])
def test_absurd_spacing_is_one_line(tmp_path, capsys, spacing):
    f = tmp_path / "t.npy"
    np.save(f, sm.phantoms.make("tube").mask)
    assert main(["analyze", str(f), "--spacing", spacing, "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "spacing")


def test_mixed_units_are_refused_by_compare(small_study, tmp_path):
    man, study = small_study
    text = man.read_text().replace("sample,path,group", "sample,path,group,spacing,unit")
    lines = text.strip().splitlines()
    lines = [lines[0]] + [ln + (",1,um" if i % 2 else ",0.001,mm") for i, ln in enumerate(lines[1:])]
    man.write_text("\n".join(lines) + "\n")
    run_cohort(man, study, options=OPTS, progress=False)
    with pytest.raises(sm.SkelmorphError, match="mixes length units"):
        compare_cohort(study)


def test_metadata_named_like_a_result_is_renamed(small_study):
    man, study = small_study
    text = man.read_text().strip().splitlines()
    text = [text[0] + ",total_length"] + [ln + ",=1+2" for ln in text[1:]]
    man.write_text("\n".join(text) + "\n")
    with pytest.warns(UserWarning, match="meta_total_length"):
        run_cohort(man, study, options=OPTS, progress=False)
    row = _rows(study, "cohort.csv")[0]
    assert float(row["total_length"]) > 0
    assert row["meta_total_length"] == "'=1+2"  # and quoted against spreadsheet formulas


def test_manifest_problems_are_one_line(tmp_path, capsys, small_study):
    man, study = small_study
    base = man.read_text()
    cases = [
        ("sample,path,group,Group\ns0,s0.tif,a,b\n", "twice"),
        (base + "s9,s0.tif,a,extra\n", "more fields than the header"),
        (base.replace("s2,", "S0,"), "only in case"),
    ]
    loop = tmp_path / "loop.tif"
    os.symlink(loop, loop)
    cases.append((base + f"s9,{loop.name},a\n", "s9"))
    for text, fragment in cases:
        man.write_text(text)
        assert main(["cohort", "run", str(man), "--out", str(study), "-q"]) == 2
        _one_line_error(capsys, fragment)


def test_options_file_is_checked_before_any_work(small_study, capsys):
    man, study = small_study
    opts = man.parent / "o.toml"
    opts.write_text('n_radii = "ten"\nprune = "no"\n')
    assert main(["cohort", "run", str(man), "--out", str(study), "--options", str(opts),
                 "-q"]) == 2
    lines = _err_lines(capsys)
    assert len(lines) == 1 and "n_radii must be an integer" in lines[0] and "prune" in lines[0]
    assert not (study / "samples").exists() or not any((study / "samples").iterdir())


def test_group_names_with_dollars_plot(small_study, tmp_path):
    # Matplotlib would parse "$a$" as mathtext; labels are plain text here.
    man, study = small_study
    man.write_text(man.read_text().replace(",a\n", ",$x_1$\n").replace(",b\n", ",b$\n"))
    run_cohort(man, study, options=OPTS, progress=False)
    res = compare_cohort(study, n_repeats=1, n_permutations=5)
    assert set(res["groups"]) == {"$x_1$", "b$"}


def test_out_problems_are_found_before_work(tmp_path, capsys):
    f = tmp_path / "t.npy"
    np.save(f, sm.phantoms.make("tube").mask)
    blocker = tmp_path / "afile"
    blocker.write_text("x")
    t0 = time.perf_counter()
    assert main(["analyze", str(f), "-q", "-o", str(blocker)]) == 2
    _one_line_error(capsys, "is an existing file")
    assert time.perf_counter() - t0 < 5


def test_empty_png_is_one_line(tmp_path, capsys):
    f = tmp_path / "empty.png"
    f.write_bytes(b"")
    assert main(["analyze", str(f), "-q", "-o", str(tmp_path / "o")]) == 2
    _one_line_error(capsys, "empty, damaged or not an image")


def test_csv_cells_that_look_like_formulas_are_quoted(tmp_path):
    # OWASP's advice on CSV injection: text starting with = + - @ is quoted;
    # numbers stay numbers.
    assert safe_cell("=cmd|' /C calc'!A0") == "'=cmd|' /C calc'!A0"
    assert safe_cell("@SUM(1)") == "'@SUM(1)" and safe_cell("+1+2") == "'+1+2"
    assert safe_cell("-1.5") == "-1.5" and safe_cell("plain") == "plain" and safe_cell(3) == 3
    write_csv(tmp_path / "t.csv", {"a": np.array(["=1+2", "-x", "ok"]), "b": np.array([-1.5, 2, 3])})
    lines = (tmp_path / "t.csv").read_text().splitlines()
    assert lines[1] == "'=1+2,-1.5" and lines[2] == "'-x,2" and lines[3] == "ok,3"


def test_options_that_need_another_are_refused_alone(tmp_path, capsys):
    f = tmp_path / "t.npy"
    np.save(f, sm.phantoms.make("y").mask)
    for args, fragment in ((["--n-trees", "5"], "--n-trees 5 needs --tree random"),
                           (["--root-face", "x+"], "--root-face needs --root face"),
                           (["--root", "point"], "--root point needs --root-point"),
                           (["--root-point", "1", "2", "3"], "--root-point needs --root point")):
        assert main(["analyze", str(f), "-q", "-o", str(tmp_path / "o")] + args) == 2
        _one_line_error(capsys, fragment)
    assert main(["analyze", str(f), "--root", "face", "--root-face", "x+", "--n-radii", "0", "-q",
                 "-o", str(tmp_path / "o")]) == 0
