"""The study report: one self-contained HTML page.

The page has no scripts and no outside resources: plain HTML with an inline
style sheet and its figures embedded as PNG data URIs (they are also kept in
``figures/`` beside it).  It reads top to bottom: headline findings, the
caution, the study, the figures, a gallery of samples, and the methods.
This module assembles the page from what ``cohort compare`` saved; the HTML
pieces are in :mod:`~skelmorph.report.blocks` and the sample pictures in
:mod:`~skelmorph.report.thumbnails`.
"""

from __future__ import annotations

import json
import platform
from pathlib import Path

import numpy as np

from .._version import __version__
from ..io import atomic_path

from .blocks import _STYLE, _esc, _fmt, _img, _num, _table, embed_images
from .thumbnails import _graph_file
from .thumbnails import gallery as _gallery
from .thumbnails import render_thumbnail

__all__ = ["write_report", "write_sample_report", "render_thumbnail", "REFERENCES"]

REFERENCES = [
    "Bouxsein ML et al. (2010) Guidelines for assessment of bone microstructure in rodents "
    "using micro-computed tomography. J Bone Miner Res 25:1468-1486.",
    "Hildebrand T, Rüegsegger P (1997) A new method for the model-independent assessment of "
    "thickness in three-dimensional images. J Microsc 185:67-75.",
    "Hildebrand T, Rüegsegger P (1997) Quantification of bone microarchitecture with the "
    "structure model index. Comput Methods Biomech Biomed Engin 1:15-23.",
    "Odgaard A, Gundersen HJG (1993) Quantification of connectivity in cancellous bone. "
    "Bone 14:173-182.",
    "Bullitt E et al. (2003) Measuring tortuosity of the intracerebral vasculature from MRA "
    "images. IEEE Trans Med Imaging 22:1163-1171.",
    "Murray CD (1926) The physiological principle of minimum work. PNAS 12:207-214.",
    "Sack L, Scoffoni C (2013) Leaf venation. New Phytol 198:983-1000.",
    "Kerby DS (2014) The simple difference formula: an approach to teaching nonparametric "
    "correlation. Compr Psychol 3:11.",
    "Tomczak M, Tomczak E (2014) The need to report effect size estimates revisited. Trends "
    "Sport Sci 21:19-25.",
    "Carrière M, Cuturi M, Oudot S (2017) Sliced Wasserstein kernel for persistence diagrams. "
    "Proc ICML, PMLR 70:664-673.",
    "Kanari L et al. (2018) A topological representation of branching neuronal morphologies. "
    "Neuroinformatics 16:3-13.",
    "Adams H et al. (2017) Persistence images. JMLR 18(8):1-35.",
    "Sholl DA (1953) Dendritic organization in the neurons of the visual and motor cortices "
    "of the cat. J Anat 87:387-406.",
    "Khalil R et al. (2022) PLoS Comput Biol 18:e1010229 (radial descriptor functions).",
    "Wilson DB (1996) Generating random spanning trees more quickly than the cover time. "
    "Proc 28th ACM STOC 296-303.",
    "Strahler AN (1957) Trans Am Geophys Union 38:913-920; Horton RE (1945) Geol Soc Am Bull "
    "56:275-370.",
    "Goldberger J et al. (2005) Neighbourhood components analysis. NIPS 17.",
    "Benjamini Y, Hochberg Y (1995) J R Stat Soc B 57:289-300.",
    "Rousseeuw PJ (1987) Silhouettes. J Comput Appl Math 20:53-65.",
    "Ojala M, Garriga GC (2010) Permutation tests for studying classifier performance. "
    "JMLR 11:1833-1863.",
]


def _versions():
    import importlib.metadata as md
    out = {"skelmorph": __version__, "python": platform.python_version()}
    for name in ("numpy", "scipy", "scikit-image", "networkx", "scikit-learn", "matplotlib",
                 "pandas", "numba", "tifffile"):
        try:
            out[name] = md.version(name)
        except md.PackageNotFoundError:
            pass
    return out


def write_report(study, out=None, max_gallery=24, max_rows=200):
    """Write ``report.html`` for an analysed and compared study folder.

    Parameters
    ----------
    study : path
        A folder written by ``cohort compare`` (the study folder, or its
        ``--out`` folder); the page only shows what the comparison saved.
    out : path, optional
        Where to write the page (default ``study/report.html``); its figures
        go to ``figures/`` beside it.
    max_gallery : int
        Sample pictures shown (spread over the groups).
    max_rows : int
        Rows of the sample table shown (the rest is in ``cohort.csv``).
    """
    import pandas as pd
    from ..errors import SkelmorphError
    folder = Path(study)  # where comparison.json and its figures are
    if not (folder / "comparison.json").exists():
        if not (folder / "cohort.csv").exists():
            raise SkelmorphError(f"{folder} holds neither a study (cohort.csv) nor a "
                                 "comparison (comparison.json)")
        raise SkelmorphError(f"{folder} has not been compared yet; run 'skelmorph cohort "
                             "compare' first (the 'cohort report' command does it for you)")
    comp = json.loads((folder / "comparison.json").read_text())
    # A comparison written elsewhere (compare --out) names its study folder.
    study = folder if (folder / "cohort.csv").exists() else Path(comp.get("study", folder))
    if not (study / "cohort.csv").exists():
        raise SkelmorphError(f"the study of {folder / 'comparison.json'} ({study}) has no "
                             "cohort.csv")
    cohort = pd.read_csv(study / "cohort.csv", dtype={"sample": str, "group": str})
    by = comp.get("by", "group")
    cohort = cohort[cohort["sample"].isin(comp["embedding"]["samples"])].reset_index(drop=True)
    labels = cohort[by].astype(str).to_numpy()
    run = json.loads((study / "run.json").read_text()) if (study / "run.json").exists() else {}
    out = Path(out) if out else folder / "report.html"
    figdir = out.parent / "figures"
    figdir.mkdir(parents=True, exist_ok=True)
    if out.parent.resolve() != folder.resolve() and (folder / "figures").exists():
        import shutil
        for f in (folder / "figures").glob("*.png"):
            shutil.copy(f, figdir / f.name)
    figs = comp.get("figures", {})
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
             f"<title>skelmorph study report</title><style>{_STYLE}</style></head><body>"]
    groups = ", ".join(f"{_esc(g)} (n = {n})" for g, n in comp["groups"].items())
    parts.append(f"<h1>Study report</h1><p class='small'>{comp['n_samples']} samples; groups "
                 f"{groups}; compared by column <code>{_esc(by)}</code>.</p>")
    # Headline findings.
    parts.append("<h2>Headline findings</h2><ul>")
    sig = comp["significant_measures"]
    if sig:
        items = []
        for m in sig[:10]:
            r = comp["measures"][m]
            unit = r.get("unit") or ""
            unit = "" if unit in ("", "1") else " " + unit
            items.append(f"<li><b>{_esc(m)}</b>: {_esc(r['effect_name'])} "
                         f"{_num('effect:' + m, r['effect_size'], 2)}, q = "
                         f"{_num('q:' + m, r['q'])}"
                         + "".join(f", {_esc(g)} mean {_fmt(v['mean'])}{_esc(unit)}"
                                   for g, v in r["groups"].items()) + "</li>")
        parts.append(f"<li>{len(sig)} measure(s) differ between groups after "
                     f"Benjamini–Hochberg correction at {comp['alpha']}:<ul>{''.join(items)}"
                     + (f"<li>and {len(sig) - 10} more (table below)</li>" if len(sig) > 10
                        else "") + "</ul>" + _esc(_effect_sentence(comp)) + "</li>")
    else:
        parts.append(f"<li>No measure differs between groups after Benjamini–Hochberg "
                     f"correction at {comp['alpha']}.</li>")
    parts.append(f"<li>Cross-validated nearest-neighbour accuracy with the learned metric "
                 f"{_num('cv_accuracy', comp['cv_accuracy'])} ± "
                 f"{_num('cv_accuracy_sd', comp['cv_accuracy_sd'])}, without it "
                 f"{_num('cv_accuracy_baseline', comp['cv_accuracy_baseline'])} ± "
                 f"{_num('cv_accuracy_baseline_sd', comp['cv_accuracy_baseline_sd'])}; chance "
                 f"{_num('chance_accuracy', comp['chance_accuracy'])}; permutation p = "
                 f"{_num('permutation_p', comp['permutation_p'])}.</li>")
    w = sorted(comp["weights"].items(), key=lambda kv: -kv[1])
    parts.append("<li>Learned descriptor weights (maximising the "
                 f"{_esc(comp['separation_index']['name'])} of the groups, "
                 f"{_num('separation_index', comp['separation_index']['value'])}): "
                 + ", ".join(f"{_esc(k)} {_num('weight:' + k, v, 2)}" for k, v in w) + ".</li></ul>")
    # Caution.
    parts.append(f"<p class='caution'><b>Caution.</b> {_esc(comp['caution'])} The comparison "
                 "describes image structure in these samples only.</p>")
    if comp.get("notes"):
        parts.append("<p class='caution'><b>Design notes.</b> " + " ".join(
            f"{_esc(n[0].upper() + n[1:])}." for n in comp["notes"]) + "</p>")
    # Study table.
    parts.append("<h2>The study</h2>")
    show = cohort.head(max_rows)
    rows = [[_esc(r["sample"]), _esc(r[by]), _esc(r.get("spacing", "")),
             _fmt(r.get("total_length", float("nan"))), _fmt(r.get("cycle_rank", float("nan")))]
            for _, r in show.iterrows()]
    u = str(cohort["unit"].iloc[0]) if "unit" in cohort.columns and len(cohort) else "um"
    parts.append(_table(["sample", by, f"voxel size, z y x ({u})", f"total length ({u})",
                         "cycle rank (independent loops)"], rows))
    if len(cohort) > max_rows:
        parts.append(f"<p class='small'>First {max_rows} of {len(cohort)} samples; all are in "
                     "cohort.csv.</p>")
    fails = comp.get("failures", [])
    if fails:
        parts.append("<h3>Failed samples</h3>" + _table(
            ["sample", "message"], [[_esc(f.get("sample", "")), _esc(f.get("error", ""))]
                                    for f in fails]))
    else:
        parts.append("<p class='small'>No sample failed.</p>")
    flagged = _sample_warnings(study, cohort["sample"])
    if flagged:
        parts.append("<h3>Segmentation warnings</h3>" + _table(
            ["sample", "warning"], [[_esc(k), _esc(w)] for k, w in flagged]))
    # Figures.
    parts.append("<h2>Measures by group</h2>")
    if "measures" in figs:
        parts.append(_img(figs["measures"], "measures by group",
                          "Every significant measure (or, if none, the eight closest), one panel "
                          "each with its unit: each point is a sample, bars are group medians, "
                          "q is the FDR-adjusted p-value."))
    parts.append(f"<p class='small'>{_esc(_effect_sentence(comp))} p: two-sided rank test; "
                 "q: p adjusted for the number of measures (Benjamini–Hochberg). All measures, "
                 "most different first.</p>")
    parts.append(_measure_table(comp))
    if "profiles" in figs:
        parts.append("<h2>Radial profiles</h2>" + _img(
            figs["profiles"], "radial profiles by group",
            "Median profile per group with the interquartile band, against distance from the "
            "root."))
    if "persistence_images" in figs:
        parts.append("<h2>Barcodes</h2>" + _img(
            figs["persistence_images"], "mean persistence images by group",
            "Mean persistence image per group (elder-rule barcodes of each sample's first "
            "spanning tree, one grid for the cohort)."))
    if "distances" in figs:
        parts.append("<h2>Distances between samples</h2>" + _img(
            figs["distances"], "distance heat map with dendrogram",
            "Combined distance (learned weights; each descriptor's distances divided by their "
            "mean, so unitless) between samples, labelled by id in dendrogram order; the strip "
            "and legend give the groups. Barcodes are compared by "
            f"{_esc(comp.get('barcode_distance', 'the Wasserstein distance'))}. Adjusted Rand index of the clustering: "
            f"{_num('ari:combined', comp['ari'].get('combined', float('nan')))}."))
    if "embeddings" in figs:
        parts.append("<h2>Embeddings</h2>" + _img(
            figs["embeddings"], "embeddings before and after the learned metric",
            "Classical scaling of the combined distance (left) and of the samples after the "
            "metric learned by neighbourhood components analysis (right)."))
    # Gallery.
    items = _gallery(study, cohort, labels, figdir / "gallery", max_gallery)
    if items:
        parts.append("<h2>Samples</h2>")
        if any(flow for *_, flow in items):
            parts.append("<p class='small'>Beside each sample with the vessel measures: its "
                         "centrelines coloured by the flow of a Poiseuille model from the "
                         "root (one log scale for the study); a model, not measured flow.</p>")
        parts.append("<div class='gallery'>" + "".join(
            f"<figure><img src='{_esc(src)}' alt='{_esc(s)}'>"
            + (f"<img src='{_esc(flow)}' alt='{_esc(s)}: modelled flow'>" if flow else "")
            + f"<figcaption>{_esc(s)} ({_esc(g)})</figcaption></figure>"
            for s, g, src, flow in items) + "</div>")
        if len(cohort) > len(items):
            parts.append(f"<p class='small'>{len(items)} of {len(cohort)} samples shown.</p>")
    # Methods.
    parts.append("<h2>Methods</h2>")
    opts = run.get("options", {})
    parts.append("<p>Each image was read with its voxel size, segmented, skeletonized "
                 "(skelmorph's distance-ordered thinning unless the options name "
                 "scikit-image's), turned into an embedded graph with radii from exact distance "
                 "transforms, and measured in physical units. Options given for the analysis: "
                 + (", ".join(f"<code>{_esc(k)} = {_esc(v)}</code>" for k, v in opts.items())
                    or "none (defaults)") + ".</p>")
    parts.append(f"<p>Groups were compared by {_esc(next(iter(comp['measures'].values()))['test']) if comp['measures'] else 'rank tests'} "
                 f"with Benjamini–Hochberg correction; classification by "
                 f"{_esc(comp.get('classifier', 'nearest neighbours'))} in "
                 f"{_esc(comp.get('cv_folds', ''))}-fold stratified cross-validation repeated "
                 f"{_esc(comp.get('cv_repeats', ''))} times, with "
                 f"{_esc(comp.get('n_permutations', ''))} label permutations.</p>")
    parts.append(_table(["software", "version"], [[_esc(k), _esc(v)] for k, v in _versions().items()]))
    parts.append("<h3>References</h3><ol class='small'>" + "".join(
        f"<li>{_esc(r)}</li>" for r in REFERENCES) + "</ol>")
    parts.append(f"<p class='small'>Written by skelmorph {__version__}.</p></body></html>")
    with atomic_path(out) as tmp:
        tmp.write_text(embed_images("".join(parts), out.parent), encoding="utf-8")
    return out


def _sample_warnings(study, samples):
    rows = []
    for sid in samples:
        try:
            summ = json.loads((Path(study) / "samples" / str(sid) / "summary.json").read_text())
        except (OSError, ValueError):
            continue
        rows += [(str(sid), w) for w in summ.get("warnings") or []]
    return rows


def _effect_sentence(comp):
    """What the sign of the effect size means, in words."""
    if not comp["measures"]:
        return ""
    r = next(iter(comp["measures"].values()))
    groups = list(r["groups"])
    if r.get("effect_name") == "rank-biserial r" and len(groups) == 2:
        return (f"The effect size is the rank-biserial correlation r (Kerby 2014), from -1 to "
                f"+1: r = +1 when every {groups[0]} sample is above every {groups[1]} sample, "
                f"-1 when every {groups[0]} sample is below, 0 when the two overlap evenly.")
    return ("The effect size is epsilon-squared of the Kruskal-Wallis test (Tomczak & Tomczak "
            "2014), from 0 (no difference) to 1; it has no sign.")


def _measure_table(comp, limit=None):
    from ..results import describe
    rows = []
    ordered = sorted(comp["measures"].items(),
                     key=lambda kv: kv[1]["q"] if np.isfinite(kv[1].get("q", np.nan)) else 9)
    for name, r in ordered[:limit]:
        unit = r.get("unit") or ""
        rows.append([f"<b>{_esc(name)}</b><br><span class='small'>"
                     f"{_esc(r.get('description') or describe(name))}</span>",
                     _esc(unit if unit != "1" else "(ratio or count)"),
                     _fmt(r["p"]), _fmt(r["q"]), _fmt(r["effect_size"], 2)]
                    + [_fmt(v["mean"]) + " ± " + _fmt(v["sd"]) for v in r["groups"].values()])
    groups = list(next(iter(comp["measures"].values()))["groups"]) if comp["measures"] else []
    return _table(["measure", "unit", "p", "q", "effect size"]
                  + [f"{g} mean ± SD" for g in groups], rows)


def _warnings_block(lines):
    if not lines:
        return "<p class='small'>No segmentation warning.</p>"
    return ("<h2>Segmentation warnings</h2><ul>" + "".join(f"<li>{_esc(w)}</li>" for w in lines)
            + "</ul><p class='small'>Check the segmentation before trusting the numbers.</p>")


def _step_text(step):
    rest = ", ".join(f"{k.replace('_', ' ')} {_fmt(v) if isinstance(v, float) else _esc(v)}"
                     for k, v in step.items() if k != "step")
    return _esc(step.get("step", "")) + (f": {rest}" if rest else "")


def _provenance_block(summary):
    """What was done to the data, in order, for a methods section."""
    items = [_step_text(st) for st in summary.get("preprocessing") or []]
    proc = summary.get("processing") or {}
    if proc:
        items.append("skeleton and graph: " + ", ".join(f"{_esc(k.replace('_', ' '))} {_esc(v)}"
                                                        for k, v in proc.items()))
    if not items:
        return ""
    return "<h2>How the data were prepared</h2><ol>" + "".join(
        f"<li>{i}</li>" for i in items) + "</ol>"


def write_sample_report(folder, result=None):
    """A one-sample page in an ``analyze`` output folder (``report.html``)."""
    from ..graph import SkeletonGraph
    folder = Path(folder)
    summary = json.loads((folder / "summary.json").read_text())
    graph = result.graph if result is not None else SkeletonGraph.read(_graph_file(folder))
    figdir = folder / "figures"
    figdir.mkdir(exist_ok=True)
    image = result.mask if (result is not None and graph.ndim == 2) else None
    render_thumbnail(graph, figdir / "graph.png", image=image, size=(5, 5), dpi=90)
    u = summary.get("unit", "")
    from ..results import describe
    units = summary.get("units", {})
    keys = [k for k, v in summary.items() if isinstance(v, (int, float)) and not isinstance(v, bool)]
    rows = [[_esc(k), _num(k, summary[k], 4),
             _esc(units.get(k, "") if units.get(k) != "1" else ""), _esc(describe(k))]
            for k in keys]
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>skelmorph "
             f"sample report</title><style>{_STYLE}</style></head><body>",
             f"<h1>Sample report</h1><p class='small'>{_esc(summary.get('source') or '')}; "
             f"lengths in {_esc(u)}.</p>",
             f"<p class='caution'><b>Caution.</b> {_esc(summary.get('caution', ''))}</p>",
             _warnings_block(summary.get("warnings") or []),
             "<h2>The network</h2>", _img("figures/graph.png", "centreline graph",
                                          f"Centrelines coloured by radius ({_esc(u)})."),
             "<h2>Measures</h2>", _table(["measure", "value", "unit", "what it is"], rows),
             _provenance_block(summary)]
    for name, cap in (("barcode.png", "Elder-rule barcode and persistence diagram."),
                      ("profiles.png", "Radial profiles around the root."),
                      ("flow.png", "Modelled Poiseuille flow from the root to the free ends "
                                   "(rigid tubes, laminar flow; not measured blood flow)."),
                      ("cortical.png", "Cortical areas per cross-section along axis 0."),
                      ("vein_orders.png", "Vein orders by width and continuity from "
                                          "the leaf base."),
                      ("plate_rod.png", "Solid nearest a plate mid-surface or a rod mid-axis, "
                                        "projected along each axis.")):
        if (folder / name).exists():
            parts.append(_img(name, name, cap))
    parts.append("<h2>Software</h2>" + _table(["software", "version"],
                                              [[_esc(k), _esc(v)] for k, v in _versions().items()]))
    parts.append("</body></html>")
    with atomic_path(folder / "report.html") as tmp:
        tmp.write_text(embed_images("".join(parts), folder), encoding="utf-8")
    return folder / "report.html"
