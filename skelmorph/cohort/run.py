"""Batch analysis of a study: cached, resumable, atomic, local pool or Dask cluster.

Every sample is analysed exactly as ``skelmorph analyze`` would, into
``OUT/samples/<sample>/``.  A sample is recomputed only when its input
content, voxel size or the analysis options changed: ``done.json`` in its
folder holds the cache key.  Each sample is written into a temporary
folder that is renamed into place when complete, so a killed run leaves no
half-written sample and a re-run picks up where it stopped.  ``done.json``
also lists the size and SHA-256 of every output; a cached sample whose files
no longer match is recomputed.  A failing sample is recorded in
``failures.csv`` with its message; the rest goes on, and every manifest row
ends up in ``cohort.csv`` or in ``failures.csv``.

One run at a time works in a study folder: an advisory lock
(``.skelmorph.lock``) is held for the whole run.  SIGINT and SIGTERM stop
the scheduling of new samples, cancel the queued ones, write the tables of
what is done and re-raise; local workers die with their parent.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import json
import os
import shutil
import signal
import time
import uuid
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._version import __version__
from ..engine import usable_cores
from ..errors import SkelmorphError
from ..io import atomic_path, safe_cell, write_csv, write_json
from ..options import validate_options
from .manifest import read_manifest

__all__ = ["run_cohort", "load_options", "RunReport", "collect_tables"]



@dataclass
class RunReport:
    """What a run did: sample ids computed, reused from cache, failed (with messages)."""

    computed: list = field(default_factory=list)
    cached: list = field(default_factory=list)
    failed: dict = field(default_factory=dict)
    seconds: float = 0.0
    repaired: dict = field(default_factory=dict)  # recomputed: the cache failed verification
    interrupted: bool = False


def load_options(path):
    """Analysis options from a TOML file (top level or an ``[analyze]`` table)."""
    if path is None:
        return {}
    try:
        import tomllib
    except ImportError:  # Python 3.10
        import tomli as tomllib
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise SkelmorphError(f"options file {path} does not exist") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise SkelmorphError(f"options file {path} is not valid TOML: {exc}") from None
    data = data.get("analyze", data)
    return validate_options(dict(data), where=f"options file {path}")


# ------------------------------------------------------------------ cache keys
def _files_of(path):
    path = Path(path)
    if path.is_dir():
        return sorted(p for p in path.iterdir() if p.is_file() and not p.name.startswith("."))
    return [path]


def _content_hash(path, previous=None):
    """SHA-256 of the input's bytes; reused from ``previous`` when size and
    modification time of every file are unchanged (a no-op re-run reads nothing)."""
    files = _files_of(path)
    stats = [[str(f), f.stat().st_size, f.stat().st_mtime_ns] for f in files]
    if previous and previous.get("stats") == stats:
        return previous["content"], stats
    h = hashlib.sha256()
    for f in files:
        h.update(f.name.encode())
        with open(f, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 22), b""):
                h.update(chunk)
    return h.hexdigest(), stats


def _cache_key(sample, content, options):
    roi = sample.roi
    if roi is not None and roi != "auto":
        roi = _content_hash(roi)[0]  # the ROI's bytes, not its name
    blob = json.dumps({"content": content, "spacing": sample.spacing, "unit": sample.unit,
                       "roi": roi, "options": options, "version": __version__},
                      sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()


def _file_digest(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 22), b""):
            h.update(chunk)
    return h.hexdigest()


def _output_manifest(folder):
    """Size and SHA-256 of every file of a finished sample (recursively)."""
    folder = Path(folder)
    return {str(p.relative_to(folder)): [p.stat().st_size, _file_digest(p)]
            for p in sorted(folder.rglob("*")) if p.is_file() and p.name != "done.json"}


def verify_outputs(folder, done):
    """None when every output recorded in ``done`` is present and intact,
    else a short reason."""
    outputs = (done or {}).get("outputs")
    if not outputs:
        return "no output checksums recorded"
    folder = Path(folder)
    for name, (size, digest) in outputs.items():
        f = folder / name
        try:
            if f.stat().st_size != size:
                return f"{name} has {f.stat().st_size} bytes, {size} were written"
        except OSError:
            return f"{name} is missing"
        if _file_digest(f) != digest:
            return f"{name} has changed since it was written"
    return None


def _read_done(folder):
    try:
        return json.loads((folder / "done.json").read_text())
    except (OSError, ValueError):
        return None


# ------------------------------------------------------------------ one sample
def _analyze_one(sample, options, out, key, stats):
    """Analyse one sample into a temporary folder, then move it into place.

    Runs in a worker (process or Dask); returns a small dict, never raises.
    """
    out = Path(out)
    final = out / "samples" / sample.sample
    tmp = out / "samples" / f".{sample.sample}.tmp-{uuid.uuid4().hex[:8]}"
    t0 = time.perf_counter()
    try:
        from ..pipeline import analyze
        opts = dict(options)
        opts.setdefault("figures", False)
        if sample.roi is not None:
            opts["roi"] = str(sample.roi)
        analyze(sample.path, spacing=sample.spacing, unit=sample.unit, out=tmp, progress=False,
                **opts)
        write_json(tmp / "done.json", {"key": key, "content": stats[0], "stats": stats[1],
                                       "outputs": _output_manifest(tmp),
                                       "sample": sample.sample, "group": sample.group,
                                       "seconds": time.perf_counter() - t0,
                                       "finished": time.time(), "skelmorph_version": __version__})
        if final.exists():
            old = final.with_name(f".{sample.sample}.old-{uuid.uuid4().hex[:8]}")
            os.replace(final, old)
            os.replace(tmp, final)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, final)
        return {"sample": sample.sample, "status": "done", "seconds": time.perf_counter() - t0}
    except Exception as exc:  # a failing sample must not stop the study
        shutil.rmtree(tmp, ignore_errors=True)
        kind = "" if isinstance(exc, SkelmorphError) else f"{type(exc).__name__}: "
        message = " ".join(str(exc).split()) or type(exc).__name__
        return {"sample": sample.sample, "status": "failed", "error": kind + message,
                "seconds": time.perf_counter() - t0}


# ------------------------------------------------------------------ the run
def run_cohort(manifest, out, options=None, workers=1, scheduler=None, progress=True):
    """Analyse every sample of a manifest; reuse what is already done.

    Parameters
    ----------
    manifest : path or list of Sample
    out : path
        Study folder: ``samples/<sample>/``, ``cohort.csv``, ``profiles.csv``,
        ``barcodes.csv``, ``failures.csv``, ``run.json``.
    options : dict or path, optional
        Options of :func:`skelmorph.analyze` (a dict or a TOML file).
    workers : int
        Local worker processes (1 runs in this process).
    scheduler : str or distributed.Client, optional
        A Dask scheduler address (``tcp://host:port``) or client; the same
        work then runs on the cluster's workers.  The study folder must be
        reachable from them (a shared file system).
    progress : bool
        Progress bar on stderr.

    Returns
    -------
    RunReport
    """
    from ..progress import Progress

    t_start = time.perf_counter()
    samples = manifest if isinstance(manifest, list) else read_manifest(manifest)
    if isinstance(options, (str, Path)):
        options = load_options(options)
    options = validate_options(dict(options or {}), where="analysis options")
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise SkelmorphError(f"--out {out} is a file, not a folder")
    try:
        (out / "samples").mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SkelmorphError(f"cannot create the study folder {out}: {exc.strerror}") from None
    if not os.access(out, os.W_OK):
        raise SkelmorphError(f"the study folder {out} is not writable")
    workers = _cap_workers(workers, scheduler)
    report = RunReport()
    with study_lock(out), _stop_on_signals() as stop:
        for stale in (out / "samples").glob(".*.tmp-*"):
            shutil.rmtree(stale, ignore_errors=True)  # ours is the only run: left by a dead one
        for stale in (out / "samples").glob(".*.old-*"):
            shutil.rmtree(stale, ignore_errors=True)
        todo = []
        for s in samples:
            folder = out / "samples" / s.sample
            done = _read_done(folder)
            content, stats = _content_hash(s.path, done)
            key = _cache_key(s, content, options)
            if done and done.get("key") == key:
                problem = verify_outputs(folder, done)
                if problem is None:
                    report.cached.append(s.sample)
                    continue
                report.repaired[s.sample] = problem
                warnings.warn(f"sample {s.sample}: cached results are damaged ({problem}); "
                              "recomputing", stacklevel=2)
            todo.append((s, key, (content, stats)))
        bar = Progress(len(todo), "cohort", enabled=progress and bool(todo))
        try:
            for result in _execute(todo, options, out, workers, scheduler, stop):
                if result["status"] == "done":
                    report.computed.append(result["sample"])
                else:
                    report.failed[result["sample"]] = result["error"]
                bar.update(note=f"{result['sample']} {result['status']}")
        except KeyboardInterrupt:
            report.interrupted = True
        missing = collect_tables(samples, out)
        for sid, why in missing.items():  # every row ends in one table or the other
            if sid not in report.failed:
                report.failed[sid] = why
        for sid in report.failed:
            if sid in report.cached:
                report.cached.remove(sid)
        by_id = {s.sample: s for s in samples}
        write_csv(out / "failures.csv", {
            "sample": list(report.failed), "path": [str(by_id[k].path) for k in report.failed],
            "error": list(report.failed.values())})
    report.seconds = time.perf_counter() - t_start
    write_json(out / "run.json", {
        "n_samples": len(samples), "computed": len(report.computed), "cached": len(report.cached),
        "failed": len(report.failed), "repaired": report.repaired,
        "interrupted": report.interrupted, "options": options, "workers": workers,
        "scheduler": str(scheduler) if scheduler else None, "seconds": report.seconds,
        "skelmorph_version": __version__})
    return report


def _cap_workers(workers, scheduler):
    workers = int(workers)
    if workers < 1:
        raise SkelmorphError("--workers must be at least 1")
    cores = usable_cores()
    if scheduler is None and workers > cores:
        warnings.warn(f"--workers {workers} is more than the {cores} cores available; "
                      f"using {cores}", stacklevel=3)
        return cores
    return workers


@contextlib.contextmanager
def study_lock(out):
    """Exclusive advisory lock on a study folder for the whole run."""
    import fcntl
    path = Path(out) / ".skelmorph.lock"
    fh = open(path, "a+")
    try:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            fh.seek(0)
            owner = fh.read().strip() or "another process"
            raise SkelmorphError(f"the study folder {out} is in use by another run ({owner}); "
                                 "wait for it to finish or use another --out") from None
        fh.seek(0)
        fh.truncate()
        fh.write(f"pid {os.getpid()}")
        fh.flush()
        yield
    finally:
        fh.close()  # releases the lock


@contextlib.contextmanager
def _stop_on_signals():
    """Turn SIGTERM into KeyboardInterrupt (as SIGINT) in the main thread, and
    remember which signal came, so the CLI can exit 130 or 143."""
    import threading
    state = {"signal": None}
    if threading.current_thread() is not threading.main_thread():
        yield state
        return

    def handler(signum, frame):
        state["signal"] = signum
        raise KeyboardInterrupt

    old = {sig: signal.signal(sig, handler) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield state
    finally:
        for sig, h in old.items():
            signal.signal(sig, h)
        if state["signal"] is not None:
            LAST_SIGNAL[0] = state["signal"]


#: The signal that stopped the last run in this process (for the exit code).
LAST_SIGNAL = [None]


def _execute(todo, options, out, workers, scheduler, stop=None):
    """Yield results as samples finish, from this process, a pool or a Dask cluster."""
    from ..engine import execute
    yield from execute(_analyze_one, [(s, options, str(out), key, stats) for s, key, stats in todo],
                       workers=workers, scheduler=scheduler, name="skelmorph-sample")


# ------------------------------------------------------------------ tables
def _scalar_items(summary):
    if "image_shape" in summary:
        yield "ndim", len(summary["image_shape"])
    for k, v in summary.items():
        if isinstance(v, bool):
            yield k, int(v)
        elif isinstance(v, (int, float)) or v is None:
            yield k, v
        elif isinstance(v, str) and k in ("unit", "lamina_source", "tree_method", "root_method",
                                          "filtration"):
            yield k, v


def collect_tables(samples, out):
    """Cohort tables from the finished sample folders.

    ``cohort.csv``: one row per finished sample (id, group, path, voxel size,
    every scalar of its summary); ``profiles.csv`` and ``barcodes.csv``: long
    tables with the sample and group on every row.
    """
    out = Path(out)
    rows, prof, bars, missing, renamed = [], [], [], {}, set()
    for s in samples:
        folder = out / "samples" / s.sample
        done = _read_done(folder)
        if not done:
            missing[s.sample] = "no finished results"
            continue
        try:
            summary = json.loads((folder / "summary.json").read_text())
        except (OSError, ValueError):
            missing[s.sample] = "summary.json is missing or unreadable"
            continue
        row = {"sample": s.sample, "group": s.group, "path": str(s.path),
               "spacing": " ".join(str(x) for x in summary.get("spacing", []))}
        results = dict(_scalar_items(summary))
        for k, v in s.meta.items():  # metadata never overwrites a result
            if k in results or k in row:
                renamed.add(k)
                k = f"meta_{k}"
            row[k] = v
        row.update(results)
        rows.append(row)
        for name, store in (("profiles.csv", prof), ("barcode.csv", bars)):
            f = folder / name
            if f.exists():
                with open(f, newline="") as fh:
                    for r in csv.DictReader(fh):
                        store.append({"sample": s.sample, "group": s.group, **r})
    for k in sorted(renamed):
        warnings.warn(f"manifest column {k!r} is named like a result; it is written to "
                      f"cohort.csv as 'meta_{k}'", stacklevel=2)
    _write_rows(out / "cohort.csv", rows)
    _write_rows(out / "profiles.csv", prof)
    _write_rows(out / "barcodes.csv", bars)
    return missing


def _write_rows(path, rows):
    keys = []
    for r in rows:
        keys.extend(k for k in r if k not in keys)
    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=keys, restval="")
            w.writeheader()
            for r in rows:
                w.writerow({k: ("" if v is None or (isinstance(v, float) and not np.isfinite(v))
                                else safe_cell(v)) for k, v in r.items()})
