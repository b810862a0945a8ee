"""Command line: ``skelmorph analyze | phantom | demo``."""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

from . import __version__
from .errors import SkelmorphError

#: Exit codes: 0 success, 2 bad input (one line on stderr), 3 a cohort run in
#: which some samples failed (the tables are still written), 130/143 stopped
#: by SIGINT/SIGTERM.
EXIT_BAD_INPUT, EXIT_SOME_FAILED = 2, 3

CAUTION_TEXT = ("Outputs are research measurements, not a diagnosis; do not use them for "
                "clinical decisions and defer to qualified practice.")


class _Parser(argparse.ArgumentParser):
    """Usage errors in one line, exit code 2, like every other bad input."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {' '.join(message.split())} (see --help)\n")


def _parser():
    p = _Parser(
        prog="skelmorph",
        description="Turn segmented 2D/3D images of branching or porous structures (bone, "
                    "vessels, leaf veins) into measured networks. " + CAUTION_TEXT,
        epilog="Run 'skelmorph demo' for a worked example on built-in phantom data.")
    p.add_argument("--version", action="version", version=f"skelmorph {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    a = sub.add_parser("analyze", help="analyse one image: skeleton graph, measures, files",
                       description="Read an image, skeletonize it, build and measure its "
                                   "centreline graph, and write graph.graphml, graph.vtp, "
                                   "nodes.csv, branches.csv and summary.json. " + CAUTION_TEXT)
    a.add_argument("image", help="TIFF/PNG/JPEG file, .npy array, a folder of 2D slices, or "
                                 "an OME-Zarr store")
    a.add_argument("--out", "-o", default=None, help="output folder (default: <image>-skelmorph)")
    a.add_argument("--spacing", type=float, nargs="+", metavar="S",
                   help="voxel size in (z) y x order, or one value; overrides the file")
    a.add_argument("--unit", default=None, help="length unit of the spacing (default um)")
    a.add_argument("--quiet", "-q", action="store_true", help="no progress bar")
    a.add_argument("--report", action="store_true",
                   help="also write report.html, a one-sample page with figures")
    from .options import add_analyze_arguments
    add_analyze_arguments(a)
    big = a._action_groups[-1]  # 'large scans', from the options list
    big.add_argument("--workers", type=int, default=None,
                     help="slabs of a large scan: local worker processes sharing the memory "
                          "limit (default one per core)")
    big.add_argument("--scheduler", default=None, metavar="ADDRESS",
                     help="slabs of a large scan on a Dask cluster, e.g. tcp://host:8786 "
                          "(shared file system)")

    f = sub.add_parser("phantom", help="write a synthetic structure with its ground truth",
                       description="Write a phantom as TIFF (with voxel size) and its "
                                   "ground truth as JSON beside it.")
    from .phantoms import PHANTOMS
    f.add_argument("name", choices=sorted(PHANTOMS))
    f.add_argument("--out", "-o", required=True, help="output .tif file")
    f.add_argument("--spacing", type=float, nargs="+", default=None, metavar="S")
    f.add_argument("--seed", type=int, default=None, help="seed (random phantoms)")

    c = sub.add_parser("cohort", help="analyse and compare a study of many samples",
                       description="Batch analysis of a study and comparison of its groups. "
                                   + CAUTION_TEXT)
    csub = c.add_subparsers(dest="cohort_command", required=True, metavar="STEP")
    r = csub.add_parser("run", help="analyse every sample of a manifest (cached, resumable)",
                        description="Analyse every sample listed in a manifest CSV (columns "
                                    "sample, path, optional group, spacing, unit) into "
                                    "OUT/samples/<sample>/, reusing finished samples, and "
                                    "write the cohort tables. " + CAUTION_TEXT)
    r.add_argument("manifest", help="CSV with one row per sample")
    r.add_argument("--out", "-o", required=True, help="study folder")
    r.add_argument("--workers", type=int, default=1, help="local worker processes (default 1)")
    r.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="run on a Dask cluster, e.g. tcp://host:8786 (shared file system)")
    r.add_argument("--options", default=None, metavar="TOML",
                   help="analysis options (the analyze keywords) in a TOML file")
    r.add_argument("--quiet", "-q", action="store_true", help="no progress bar")
    k2 = csub.add_parser("compare", help="compare the groups of an analysed study",
                         description="Statistics, distances, learned descriptor weights and "
                                     "metric, classification, clustering and figures for the "
                                     "groups of a study folder. " + CAUTION_TEXT)
    k2.add_argument("study", help="study folder written by 'cohort run'")
    k2.add_argument("--by", default="group", help="column that defines the groups")
    k2.add_argument("--out", default=None, help="output folder (default: the study folder)")
    k2.add_argument("--permutations", type=int, default=100,
                    help="label permutations for the p-value of the accuracy (default 100)")
    k2.add_argument("--repeats", type=int, default=10,
                    help="repeats of the stratified cross-validation (default 10)")
    k2.add_argument("--seed", type=int, default=0)
    k2.add_argument("--barcode-distance", choices=("sliced", "exact"), default="sliced",
                    help="barcode comparison: sliced Wasserstein over 50 directions (default, "
                         "fast) or the exact 1-Wasserstein matching (cubic in the bars)")
    k2.add_argument("--quiet", "-q", action="store_true", help="no progress bar")
    k3 = csub.add_parser("report", help="write the study's report page (report.html)",
                         description="Write one self-contained HTML page (figures in figures/ "
                                     "beside it) for an analysed study; compares it first if "
                                     "needed. " + CAUTION_TEXT)
    k3.add_argument("study", help="study folder")
    k3.add_argument("--out", default=None, help="page path (default STUDY/report.html)")
    k3.add_argument("--gallery", type=int, default=24, help="sample pictures shown (default 24)")

    d = sub.add_parser("demo", help="run the main job on built-in phantom data",
                       description="Build an invented two-group study of phantom scans, "
                                   "analyse it, compare the groups and print how they "
                                   "differ. " + CAUTION_TEXT)
    d.add_argument("out", nargs="?", default="skelmorph-demo", help="output folder")
    d.add_argument("--quiet", "-q", action="store_true", help="no progress bar")
    return p


def _cmd_analyze(args):
    from .options import options_from_cli
    from .pipeline import analyze

    out = Path(args.out) if args.out else Path(str(Path(args.image).with_suffix("")) + "-skelmorph")
    if args.workers is not None and args.workers < 1:
        raise SkelmorphError("--workers must be at least 1")
    result = analyze(args.image, spacing=args.spacing, unit=args.unit, out=out,
                     workers=args.workers, scheduler=args.scheduler,
                     progress=not args.quiet, **options_from_cli(args))
    if args.report:
        from .report.html import write_sample_report
        write_sample_report(out, result)
    print(summary_lines(args.image, result.summary))
    files = ", ".join(sorted(p.name for p in out.iterdir() if not p.name.startswith(".")))
    print(f"results in {out}/ ({files})")
    print(CAUTION_TEXT)


#: Keys printed after 'skelmorph analyze', in this order, when present.
_PRINTED = ("total_length", "n_branches", "n_junctions", "n_tips", "n_components", "cycle_rank",
            "mean_radius", "volume_fraction", "BV/TV", "Tb.Th", "Tb.Sp", "Tb.N", "Tb.N.direct", "Conn.D",
            "SMI", "DA", "pBV/TV", "rBV/TV", "length_density", "murray_exponent", "VLA", "areole_count",
            "free_ending_veinlets", "barcode_n_bars", "barcode_total_persistence",
            "max_strahler_order", "profile_max_crossings", "profile_radius_of_max_crossings")


def summary_lines(image, s):
    """The few lines printed after an analysis: values with units, from the
    results registry."""
    from .results import describe, format_value
    u = s["unit"]
    units = s.get("units", {})
    lines = [f"{image}: {len(s['image_shape'])}D image {tuple(s['image_shape'])}, "
             f"voxel {tuple(s['spacing'])} {u}"]
    if s["roi"]["source"] != "whole image":
        lines.append(f"  region of interest: {s['roi']['source']}, "
                     f"{format_value(s['roi']['volume'])} {u}^{len(s['image_shape'])} "
                     f"({s['roi']['fraction_of_image']:.0%} of the image)")
    if s.get("n_chunks", 1) > 1:
        lines.append(f"  analysed in {s['n_chunks']} slabs read from the file (halo "
                     f"{format_value(s['halo'])} {u}); same graph as in memory")
    for key in _PRINTED:
        if key in s:
            unit = units.get(key, "")
            unit = "" if unit in ("1", "") else " " + unit
            lines.append(f"  {key:<34} {format_value(s[key]):>10}{unit:<10}  {describe(key)}"
                         .rstrip())
    if "tree_method" in s:
        lines.append(f"  (trees: {s['tree_method']} spanning tree, root {s['root_method']}, "
                     f"{s['filtration']} filtration)")
    return "\n".join(lines)


def _cmd_phantom(args):
    from .io import write_json, write_tiff
    from .phantoms import make

    kwargs = {}
    if args.spacing is not None:
        kwargs["spacing"] = args.spacing if len(args.spacing) > 1 else args.spacing[0]
    if args.seed is not None:
        kwargs["seed"] = args.seed
    try:
        ph = make(args.name, **kwargs)
    except TypeError as exc:
        raise SkelmorphError(f"phantom {args.name!r}: {exc}") from None
    out = Path(args.out)
    if out.suffix.lower() not in (".tif", ".tiff"):
        out = out.with_suffix(".tif")
    write_tiff(out, ph.mask, ph.spacing, ph.unit)
    truth = out.with_suffix(".json")
    import numpy as np
    plain = {k: v for k, v in ph.truth.items() if not isinstance(v, np.ndarray)}  # no masks
    write_json(truth, {"phantom": args.name, "spacing": ph.spacing, "unit": ph.unit,
                       "shape": list(ph.mask.shape), "truth": plain})
    print(f"wrote {out} {ph.mask.shape} voxel {ph.spacing} {ph.unit}, truth in {truth}")


def _cmd_cohort(args):
    if args.cohort_command == "run":
        from .cohort.run import run_cohort
        rep = run_cohort(args.manifest, args.out, options=args.options, workers=args.workers,
                         scheduler=args.scheduler, progress=not args.quiet)
        print(f"{len(rep.computed)} analysed, {len(rep.cached)} reused, {len(rep.failed)} failed "
              f"in {rep.seconds:.1f} s; results in {args.out}/ (samples/, cohort.csv, "
              f"profiles.csv, barcodes.csv, failures.csv)")
        for sample, why in rep.repaired.items():
            print(f"  recomputed: {sample}: cached results were damaged ({why})")
        for sample, message in rep.failed.items():
            print(f"  failed: {sample}: {message}")
        if rep.interrupted:
            import signal
            from .cohort.run import LAST_SIGNAL
            print("skelmorph: interrupted; the tables hold the samples finished so far",
                  file=sys.stderr)
            return 143 if LAST_SIGNAL[0] == signal.SIGTERM else 130
        return EXIT_SOME_FAILED if rep.failed else 0
    if args.cohort_command == "report":
        from .report.html import write_report
        if not (Path(args.study) / "comparison.json").exists() and \
                (Path(args.study) / "cohort.csv").exists():
            from .cohort.compare import compare_cohort
            compare_cohort(args.study, progress=True)
        page = write_report(args.study, out=args.out, max_gallery=args.gallery)
        print(f"report: {page}")
        print(CAUTION_TEXT)
        return 0
    from .cohort.compare import compare_cohort
    res = compare_cohort(args.study, by=args.by, out=args.out, n_repeats=args.repeats,
                         n_permutations=args.permutations, seed=args.seed,
                         barcode_distance=args.barcode_distance, progress=not args.quiet)
    print(headline(res))
    print(f"tables, figures and comparison.json in {args.out or args.study}/")
    print(CAUTION_TEXT)
    return 0


def headline(res):
    """A few plain lines on how the groups differ."""
    groups = ", ".join(f"{g} (n={n})" for g, n in res["groups"].items())
    lines = [f"{res['n_samples']} samples in groups {groups}"]
    sig = res["significant_measures"]
    if sig:
        parts = []
        for m in sig[:6]:
            r = res["measures"][m]
            parts.append(f"{m} (q={r['q']:.2g}, {r['effect_name']} {r['effect_size']:+.2f})")
        lines.append(f"measures that differ (FDR {res['alpha']}): " + "; ".join(parts)
                     + (f"; and {len(sig) - 6} more" if len(sig) > 6 else ""))
        names = list(res["groups"])
        if res["measures"][sig[0]]["effect_name"] == "rank-biserial r" and len(names) == 2:
            lines.append(f"  (r > 0: {names[0]} tends to be higher than {names[1]}; r < 0: "
                         "lower; |r| = 1: the groups do not overlap)")
    else:
        lines.append(f"no measure differs after FDR at {res['alpha']}")
    lines.append(f"cross-validated accuracy {res['cv_accuracy']:.2f} ± {res['cv_accuracy_sd']:.2f} "
                 f"with the learned metric, {res['cv_accuracy_baseline']:.2f} ± "
                 f"{res['cv_accuracy_baseline_sd']:.2f} without (chance "
                 f"{res['chance_accuracy']:.2f}); permutation p = {res['permutation_p']:.3g}")
    w = ", ".join(f"{k} {v:.2f}" for k, v in sorted(res["weights"].items(), key=lambda kv: -kv[1])
                  if v >= 0.005)
    lines.append(f"descriptor weights ({res['separation_index']['name']} "
                 f"{res['separation_index']['value']:.2f}): {w}")
    return "\n".join(lines)


def _cmd_demo(args):
    from .demo import SAMPLES_PER_GROUP, run_demo

    print("skelmorph demo: an invented study of printed porous scaffolds, fresh vs after a "
          f"degradation bath, {SAMPLES_PER_GROUP} phantom scans per group.", flush=True)
    res = run_demo(args.out, progress=not args.quiet)
    print(headline(res))
    print(f"scans and manifest in {args.out}/, results in {args.out}/study/ (samples/, "
          "cohort.csv, measures.csv, comparison.json, figures/)")
    print(f"report: {Path(args.out) / 'study' / 'report.html'}")
    print(CAUTION_TEXT)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"skelmorph: warning: {message}", file=sys.stderr)


def main(argv=None):
    """Entry point; returns the exit code (0 success, 2 bad input)."""
    args = _parser().parse_args(argv)
    warnings.showwarning = _show_warning
    try:
        code = {"analyze": _cmd_analyze, "phantom": _cmd_phantom, "demo": _cmd_demo,
                "cohort": _cmd_cohort}[args.command](args)
    except SkelmorphError as exc:
        print(f"skelmorph: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("skelmorph: interrupted", file=sys.stderr)
        return 130
    return code or 0


if __name__ == "__main__":
    sys.exit(main())
