"""Compare the groups of a study: statistics, distances, learned weights and
metric, classification, clustering, embeddings and figures.

Every descriptor a sample folder holds takes part without changes here:
scalar summary measures (whatever sets were computed), radial profiles,
barcodes (and their persistence images) and path counts.  Results are
research findings about image structure, not diagnoses.

The work is split by what it does: :mod:`~skelmorph.cohort.study` loads the
folder, :mod:`~skelmorph.cohort.distances` compares samples and learns
descriptor weights, :mod:`~skelmorph.cohort.models` classifies and embeds;
this module runs them and saves every table and figure the report shows.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

from ..errors import SkelmorphError
from ..io import write_csv, write_json
from .distances import (BARCODE_DISTANCES, PROFILE_DESCRIPTORS, SLICED_DIRECTIONS,
                        descriptor_distances, learn_weights, normalised)
from .models import (classical_mds, classify, cluster_ari, feature_matrix,
                     nca_feature_weights)
from .stats import benjamini_hochberg, compare_groups
from .study import load_study, scalar_measures

__all__ = ["compare_cohort", "design_notes", "SEPARATION_INDEX"]

SEPARATION_INDEX = "silhouette"


def design_notes(counts, alpha):
    """Plain warnings about a study design that cannot show much.

    The smallest two-sided p-value an exact rank test can reach between two
    groups of n1 and n2 samples is 2 / C(n1 + n2, n1) (all of one group
    above all of the other; Mann & Whitney 1947); with the
    Kruskal-Wallis test for more groups the pairwise bound of the two
    smallest groups is used as a guide.
    """
    from math import comb
    notes = []
    small = [int(c) for c in counts if c < 3]
    if small:
        notes.append(f"{len(small)} group(s) have fewer than 3 samples: statistics, "
                     "cross-validation and clustering are not meaningful for them")
    a, b = sorted(int(c) for c in counts)[:2]
    floor = 2.0 / comb(a + b, a)
    if floor > alpha:
        notes.append(f"with groups of {a} and {b} samples the smallest attainable p-value is "
                     f"{floor:.3g}, above alpha = {alpha}: no measure can reach significance")
    return notes


def compare_cohort(study, by="group", out=None, n_repeats=10, n_permutations=100, seed=0,
                   figures=True, alpha=0.05, barcode_distance="sliced", progress=False):
    """Compare the groups of a study folder; write tables, figures and comparison.json.

    ``barcode_distance`` is ``"sliced"`` (default) or ``"exact"`` (see
    :func:`descriptor_distances`); ``progress`` draws a bar on stderr.

    Returns
    -------
    dict
        The content of ``comparison.json``: ``n_samples``, ``groups``,
        ``cv_accuracy`` (+ ``_sd``, baseline without the learned metric),
        ``permutation_p``, ``weights``, ``separation_index``,
        ``significant_measures`` (Benjamini-Hochberg q < ``alpha``),
        ``measures`` (per-measure statistics), ``ari``, ``nca_feature_weights``
        and the caution.
    """
    from ..pipeline import CAUTION
    from ..progress import Progress
    if barcode_distance not in BARCODE_DISTANCES:
        raise SkelmorphError(f"barcode_distance must be one of {', '.join(BARCODE_DISTANCES)}, "
                             f"not {barcode_distance!r}")
    study_dir = Path(study)
    out = Path(out) if out is not None else study_dir
    st = load_study(study_dir, by)
    cohort = st["cohort"]
    labels = cohort[by].to_numpy(str)
    groups, counts = np.unique(labels, return_counts=True)
    if len(groups) < 2:
        raise SkelmorphError(f"need at least two groups in column {by!r}; found {list(groups)}")
    notes = design_notes(counts, alpha)
    meas = scalar_measures(cohort)
    rows = {name: compare_groups(meas[name].to_numpy(float), labels) for name in meas.columns}
    q = benjamini_hochberg([r["p"] for r in rows.values()])
    for (name, r), qq in zip(rows.items(), q):
        r["q"] = float(qq)
    significant = sorted((n for n, r in rows.items() if np.isfinite(r["q"]) and r["q"] < alpha),
                         key=lambda n: rows[n]["q"])
    bar = Progress(len(cohort) + n_permutations, "compare", enabled=progress)
    distances = descriptor_distances(st, barcode_distance, progress=bar.update)
    weights, index, single = learn_weights(distances, labels)
    norm = normalised(distances)
    combined = sum(w * norm[k] for k, w in weights.items())
    ari = {k: cluster_ari(d, labels) for k, d in distances.items()}
    ari["combined"] = cluster_ari(combined, labels)
    X, names = feature_matrix(st)
    cls = classify(X, labels, n_repeats=n_repeats, n_permutations=n_permutations, seed=seed,
                   progress=bar.update)
    if bar.done < bar.total:
        bar.update(bar.total - bar.done)
    feat_w, transformed = nca_feature_weights(X, labels, names, seed) if X.shape[1] else ({}, X)
    top = dict(sorted(feat_w.items(), key=lambda kv: -kv[1])[:15])
    result = {
        "n_samples": int(len(cohort)),
        "groups": {str(g): int(c) for g, c in zip(groups, counts)},
        "by": by,
        **cls,
        "weights": weights,
        "separation_index": {"name": SEPARATION_INDEX, "value": index,
                             "per_descriptor": single},
        "barcode_distance": ("exact 1-Wasserstein" if barcode_distance == "exact" else
                             f"sliced Wasserstein, {SLICED_DIRECTIONS} directions"),
        "significant_measures": significant,
        "alpha": alpha,
        "measures": rows,
        "ari": ari,
        "nca_feature_weights": top,
        "failures": st["failures"],
        "study": str(study_dir.resolve()),
        "caution": CAUTION,
    }
    if np.isfinite(cls.get("cv_accuracy", np.nan)) and cls["cv_accuracy"] < cls["chance_accuracy"]:
        notes.append(f"cross-validated accuracy {cls['cv_accuracy']:.2f} is below chance "
                     f"({cls['chance_accuracy']:.2f}): the descriptors do not separate the "
                     "groups")
    result["notes"] = notes
    for line in notes:
        warnings.warn(line, UserWarning, stacklevel=2)
    out.mkdir(parents=True, exist_ok=True)
    from ..results import describe, unit_of
    unit = str(cohort["unit"].iloc[0]) if "unit" in cohort.columns else "um"
    ndim = int(cohort["ndim"].iloc[0]) if "ndim" in cohort.columns else 3
    for name, r in rows.items():
        r["unit"] = unit_of(name, unit, ndim)
        r["description"] = describe(name)
    table = {"measure": list(rows), "unit": [r["unit"] for r in rows.values()],
             "description": [r["description"] for r in rows.values()],
             "test": [r["test"] for r in rows.values()],
             "statistic": [r["statistic"] for r in rows.values()],
             "p": [r["p"] for r in rows.values()], "q": [r["q"] for r in rows.values()],
             "effect_size": [r["effect_size"] for r in rows.values()],
             "effect_name": [r["effect_name"] for r in rows.values()]}
    for g in groups:
        table[f"{g}_mean"] = [r["groups"][str(g)]["mean"] for r in rows.values()]
        table[f"{g}_sd"] = [r["groups"][str(g)]["sd"] for r in rows.values()]
    write_csv(out / "measures.csv", table)
    ddir = out / "distances"
    ddir.mkdir(exist_ok=True)
    for k, d in {**distances, "combined": combined}.items():
        write_csv(ddir / f"{k.replace(':', '_')}.csv",
                  {"sample": cohort["sample"].tolist(),
                   **{s: d[:, i] for i, s in enumerate(cohort["sample"])}})
    embed_before = classical_mds(combined)
    from scipy.spatial.distance import pdist, squareform
    embed_after = classical_mds(squareform(pdist(transformed))) if transformed.shape[1] else embed_before
    result["embedding"] = {"before": embed_before.tolist(), "after": embed_after.tolist(),
                           "samples": cohort["sample"].tolist()}
    if figures:
        result["figures"] = _figures(st, rows, significant, combined, embed_before, embed_after,
                                     labels, out / "figures")
    write_json(out / "comparison.json", result)
    return result


def _figures(st, rows, significant, combined, before, after, labels, folder):
    from ..report.figures import (new_axes, plot_dendrogram_heatmap, plot_embedding,
                                  plot_group_values, plot_profile_bands, save)
    folder.mkdir(parents=True, exist_ok=True)
    cohort = st["cohort"]
    unit = str(cohort["unit"].iloc[0]) if "unit" in cohort.columns else ""
    made = {}
    # Every significant measure (small multiples), or the eight closest to it.
    shown = significant or [m for m in sorted(rows, key=lambda m: rows[m]["p"]
                                              if np.isfinite(rows[m]["p"]) else 9)][:8]
    if shown:
        cols = 4 if len(shown) <= 8 else 6
        fig, axes = new_axes(cols, (len(shown) + cols - 1) // cols, size=(2.4, 2.1))
        for ax, name in zip(axes.ravel(), shown):
            plot_group_values(cohort[name].to_numpy(float), labels, ax, name,
                              q=rows[name]["q"], unit=rows[name].get("unit"))
        for ax in axes.ravel()[len(shown):]:
            ax.set_visible(False)
        save(fig, folder / "measures.png")
        made["measures"] = "figures/measures.png"
    prof = st["profiles"]
    if prof is not None and len(prof):
        cols = [c for c in PROFILE_DESCRIPTORS if c in prof.columns]
        fig, axes = new_axes(len(cols), 1, size=(3.6, 2.8))
        label_of = dict(zip(cohort["sample"], labels))
        for ax, col in zip(axes.ravel(), cols):
            plot_profile_bands(prof, label_of, col, ax, unit=unit)
        save(fig, folder / "profiles.png")
        made["profiles"] = "figures/profiles.png"
    bars = st["barcodes"]
    if bars is not None and len(bars):
        from ..descriptors.barcode import diagrams_from_table
        from ..descriptors.persistence_images import PersistenceImager
        from ..report.figures import plot_persistence_means
        diagrams = diagrams_from_table(bars, cohort["sample"].tolist())
        if any(len(d) for d in diagrams):
            pim = PersistenceImager(resolution=(24, 24)).fit(diagrams)
            fig = plot_persistence_means(pim.transform(diagrams), pim.shape_, pim.x_edges_,
                                         pim.y_edges_, labels, unit)
            save(fig, folder / "persistence_images.png")
            made["persistence_images"] = "figures/persistence_images.png"
    fig = plot_dendrogram_heatmap(combined, labels, samples=cohort["sample"].tolist())
    save(fig, folder / "distances.png")
    made["distances"] = "figures/distances.png"
    fig, axes = new_axes(2, 1, size=(3.4, 3.0))
    plot_embedding(before, labels, axes[0, 0], "combined distance (classical MDS)")
    plot_embedding(after, labels, axes[0, 1], "after the learned metric (NCA)")
    save(fig, folder / "embeddings.png")
    made["embeddings"] = "figures/embeddings.png"
    return made
