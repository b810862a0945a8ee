"""Compare the groups of a study: statistics, distances, learned weights and
metric, classification, clustering, embeddings and figures.

Every descriptor a sample folder holds takes part without changes here:
scalar summary measures (whatever sets were computed), radial profiles,
barcodes (and their persistence images) and path counts.  Results are
research findings about image structure, not diagnoses.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

from ..errors import SkelmorphError
from ..io import write_csv, write_json
from ..descriptors.barcode import diagrams_from_table
from .stats import benjamini_hochberg, compare_groups

__all__ = ["compare_cohort", "load_study", "descriptor_distances", "learn_weights",
           "feature_matrix", "classify", "classical_mds", "SEPARATION_INDEX"]

SEPARATION_INDEX = "silhouette"
PROFILE_DESCRIPTORS = ("crossings", "total_length")


# ---------------------------------------------------------------- loading
def load_study(study, by="group"):
    """The finished samples of a study folder and their descriptors (pandas)."""
    import pandas as pd
    study = Path(study)
    f = study / "cohort.csv"
    if not f.exists():
        raise SkelmorphError(f"{study} has no cohort.csv; run 'skelmorph cohort run' first")
    cohort = pd.read_csv(f, dtype={"sample": str, "group": str})
    if by not in cohort.columns:
        raise SkelmorphError(f"column {by!r} is not in {f}; columns: {', '.join(cohort.columns)}")
    cohort = cohort[cohort[by].notna() & (cohort[by].astype(str) != "")].reset_index(drop=True)
    cohort[by] = cohort[by].astype(str)
    if "unit" in cohort.columns:
        units = sorted(set(cohort["unit"].dropna().astype(str)))
        if len(units) > 1:
            raise SkelmorphError(f"the study mixes length units ({', '.join(units)}); its "
                                 "measures cannot be compared as they are: give every sample's "
                                 "spacing in one unit in the manifest and re-run")
    if len(cohort) < 2:
        raise SkelmorphError(f"need at least two finished samples with a {by!r}; found {len(cohort)}")

    def long(name):
        p = study / name
        if p.exists() and p.stat().st_size > 2:
            t = pd.read_csv(p, dtype={"sample": str, "group": str})
            return t[t["sample"].isin(cohort["sample"])]
        return None

    failures = []
    fp = study / "failures.csv"
    if fp.exists() and fp.stat().st_size > 2:
        failures = pd.read_csv(fp, dtype=str).fillna("").to_dict("records")
    return {"cohort": cohort, "profiles": long("profiles.csv"), "barcodes": long("barcodes.csv"),
            "failures": failures, "by": by}


def scalar_measures(cohort):
    """Numeric summary columns that are structure measures of the results
    registry (:mod:`skelmorph.results`; not processing records or manifest
    metadata) and vary across samples (pandas DataFrame)."""
    from ..results import PROCESSING_KEYS, lookup
    num = cohort.select_dtypes(include=[np.number])
    keep = [c for c in num.columns if lookup(c) is not None and c not in PROCESSING_KEYS
            and lookup(c).kind != "identifier"
            and num[c].notna().mean() >= 0.5 and np.nanstd(num[c].to_numpy(float)) > 0]
    return num[keep]


# ------------------------------------------------------------- descriptors
def _profile_grid(profiles, samples, column, n_grid=64):
    """Each sample's profile column on a common radius grid, (n, n_grid), and the grid."""
    from ..descriptors.radial import profiles_on_grid
    grid = np.linspace(0.0, float(profiles["radius"].max()), n_grid)
    return profiles_on_grid(profiles, samples, column, grid), grid


def _zscore(x):
    x = np.asarray(x, float)
    mu = np.nanmean(x, axis=0)
    sd = np.nanstd(x, axis=0)
    z = (x - mu) / np.where(sd > 0, sd, 1)
    return np.nan_to_num(z)


#: How barcodes are compared: the sliced Wasserstein distance (Carriere et
#: al. 2017) by default, the exact 1-Wasserstein matching on request.
BARCODE_DISTANCES = ("sliced", "exact")
SLICED_DIRECTIONS = 50


def descriptor_distances(study, barcode_distance="sliced", progress=None):
    """Distance matrices between samples, one per descriptor found.

    ``measures``: Euclidean on z-scored scalar measures; ``profile:<column>``:
    L1 over radius on a common grid (:func:`skelmorph.profile_distance`);
    ``barcode``: between elder-rule barcodes of the first tree, the sliced
    Wasserstein distance over 50 directions
    (:func:`skelmorph.descriptors.distances.sliced_wasserstein_distance`) or,
    with ``barcode_distance="exact"``, the exact 1-Wasserstein distance
    (cubic in the number of bars: 28 s for the 16-sample demo against 0.3 s);
    ``persistence_image``: L2 between persistence images on one grid fitted
    to the cohort; ``paths``: Euclidean on log(1 + path counts).
    """
    from scipy.spatial.distance import cdist, pdist, squareform
    cohort = study["cohort"]
    samples = cohort["sample"].tolist()
    out = {}
    meas = scalar_measures(cohort)
    if meas.shape[1]:
        out["measures"] = squareform(pdist(_zscore(meas.to_numpy(float))))
    prof = study["profiles"]
    if prof is not None and len(prof):
        for col in PROFILE_DESCRIPTORS:
            if col in prof.columns:
                y, grid = _profile_grid(prof, samples, col)
                dr = grid[1] - grid[0] if len(grid) > 1 else 1.0
                # Trapezoid L1: interior points weigh dr, the two ends dr / 2.
                w = np.full(len(grid), dr)
                w[[0, -1]] = dr / 2
                out[f"profile:{col}"] = cdist(y * w, y * w, "cityblock")
    bars = study["barcodes"]
    if bars is not None and len(bars):
        from ..descriptors.distances import sliced_wasserstein_matrix, wasserstein_distance
        from ..descriptors.images import PersistenceImager
        diagrams = diagrams_from_table(bars, samples)
        n = len(samples)
        if barcode_distance == "exact":
            d = np.zeros((n, n))
            for i in range(n):
                for j in range(i + 1, n):
                    d[i, j] = d[j, i] = wasserstein_distance(diagrams[i], diagrams[j], 1)
                if progress is not None:
                    progress(1)
        else:
            last = [0]

            def rows_done(i):
                if progress is not None:
                    progress(i - last[0])
                last[0] = i
            d = sliced_wasserstein_matrix(diagrams, SLICED_DIRECTIONS, progress=rows_done)
        out["barcode"] = d
        if any(len(x) for x in diagrams):
            imgs = PersistenceImager(resolution=(12, 12)).fit_transform(diagrams)
            out["persistence_image"] = squareform(pdist(imgs))
    path_cols = [c for c in cohort.columns if c.startswith("paths_") and c.endswith("_edges")]
    if path_cols:
        v = np.log1p(cohort[path_cols].to_numpy(float))
        out["paths"] = squareform(pdist(np.nan_to_num(v)))
    return out


def _normalised(distances):
    """Each matrix divided by its mean off-diagonal value (so weights compare)."""
    out = {}
    for k, d in distances.items():
        n = len(d)
        m = d.sum() / max(n * (n - 1), 1)
        out[k] = d / m if m > 0 else d
    return out


def _silhouette(d, labels):
    """Mean silhouette coefficient (Rousseeuw 1987) from a distance matrix;
    samples alone in their group count 0, as in scikit-learn's
    ``silhouette_score``.  Vectorised, because the weight search calls it
    some 2000 times."""
    labels = np.asarray(labels)
    groups, code = np.unique(labels, return_inverse=True)
    if len(groups) < 2 or len(groups) >= len(labels):
        return float("nan")
    onehot = np.eye(len(groups))[code]
    sums = np.asarray(d, float) @ onehot                 # (n, groups)
    sizes = onehot.sum(axis=0)
    own = sizes[code] - 1
    a = sums[np.arange(len(code)), code] / np.maximum(own, 1)
    other = sums / sizes
    other[np.arange(len(code)), code] = np.inf
    b = other.min(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        s = np.where(own > 0, (b - a) / np.maximum(a, b), 0.0)
    return float(np.mean(np.nan_to_num(s)))


def _simplex_lattice(k, steps):
    """All weight vectors with entries in {0, 1/steps, ..., 1} summing to 1."""
    if k == 1:
        return np.ones((1, 1))
    pts = []

    def rec(prefix, left, depth):
        if depth == k - 1:
            pts.append(prefix + [left])
            return
        for i in range(left + 1):
            rec(prefix + [i], left - i, depth + 1)

    rec([], steps, 0)
    return np.array(pts, float) / steps


def learn_weights(distances, labels, max_points=2000):
    """Descriptor weights on the simplex that best separate the groups.

    Maximises the silhouette coefficient (Rousseeuw 1987, J Comput Appl Math
    20:53) of the group labels on the combined distance sum_d w_d D_d, each
    D_d divided by its mean off-diagonal value, over w >= 0, sum w = 1:
    every point of the finest simplex lattice with at most ``max_points``
    points, then a constrained local refinement (SLSQP) from the best one.
    In-sample: read the weights as an interpretation of which descriptors
    carry the difference, not as a test.

    Returns
    -------
    weights : dict
    index : float
        The silhouette at the optimum.
    per_descriptor : dict
        The silhouette of each descriptor alone.
    """
    from math import comb

    from scipy.optimize import minimize
    names = sorted(distances)
    norm = _normalised(distances)
    mats = np.stack([norm[k] for k in names])
    labels = np.asarray(labels)
    single = {k: _silhouette(norm[k], labels) for k in names}

    def score(w):
        w = np.clip(w, 0, None)
        w = w / w.sum() if w.sum() > 0 else np.full(len(w), 1 / len(w))
        return _silhouette(np.tensordot(w, mats, 1), labels)

    steps = 1
    while comb(steps + 1 + len(names) - 1, len(names) - 1) <= max_points and steps < 50:
        steps += 1
    lattice = _simplex_lattice(len(names), steps)
    scores = np.array([score(w) for w in lattice])
    scores = np.where(np.isfinite(scores), scores, -np.inf)
    best = lattice[int(np.argmax(scores))]
    best_score = float(scores.max())
    if len(names) > 1 and np.isfinite(best_score):
        res = minimize(lambda w: -score(w), best, method="SLSQP", bounds=[(0, 1)] * len(names),
                       constraints=[{"type": "eq", "fun": lambda w: w.sum() - 1}],
                       options={"maxiter": 100, "ftol": 1e-9})
        if res.success and -res.fun > best_score:
            best = np.clip(res.x, 0, None) / np.clip(res.x, 0, None).sum()
            best_score = float(-res.fun)
    return {k: float(w) for k, w in zip(names, best)}, best_score, single


# ------------------------------------------------------- features and models
def feature_matrix(study):
    """Vectorised descriptors of every sample: scalar measures, profiles on a
    coarse common grid, persistence images, log path counts.

    Returns
    -------
    X : (n, p) float array (NaN where missing)
    names : list of str
    """
    cohort = study["cohort"]
    samples = cohort["sample"].tolist()
    meas = scalar_measures(cohort)
    blocks, names = [meas.to_numpy(float)], list(meas.columns)
    prof = study["profiles"]
    if prof is not None and len(prof):
        for col in PROFILE_DESCRIPTORS:
            if col in prof.columns:
                y, grid = _profile_grid(prof, samples, col, n_grid=16)
                blocks.append(y)
                names += [f"profile:{col}@{r:.3g}" for r in grid]
    bars = study["barcodes"]
    if bars is not None and len(bars):
        from ..descriptors.images import PersistenceImager
        diagrams = diagrams_from_table(bars, samples)
        if any(len(x) for x in diagrams):
            pim = PersistenceImager(resolution=(6, 6))
            blocks.append(pim.fit_transform(diagrams))
            names += [f"persistence_image[{i},{j}]" for i in range(6) for j in range(6)]
    X = np.hstack(blocks) if blocks else np.zeros((len(samples), 0))
    keep = np.nanstd(X, axis=0) > 0
    return X[:, keep], [n for n, k in zip(names, keep) if k]


class _FoldModel:
    """Median imputation, standardisation and (optionally) an NCA metric fitted
    on training samples, with a k-nearest-neighbour vote (uniform weights,
    ties to the first class in sorted order, as scikit-learn's
    KNeighborsClassifier).  Written out because the classifier runs a few
    thousand times per comparison on a dozen samples, where the general
    pipeline's per-call overhead dominated (9 ms per prediction)."""

    def __init__(self, n_neighbors, learn_metric, seed):
        self.k, self.learn_metric, self.seed = n_neighbors, learn_metric, seed

    def fit(self, X, y):
        self.median = np.nanmedian(X, axis=0)
        self.median = np.where(np.isfinite(self.median), self.median, 0.0)
        Z = np.where(np.isnan(X), self.median, X)
        self.mu, sd = Z.mean(axis=0), Z.std(axis=0)
        self.sd = np.where(sd > 0, sd, 1.0)
        Z = (Z - self.mu) / self.sd
        self.nca = None
        if self.learn_metric:
            from sklearn.neighbors import NeighborhoodComponentsAnalysis
            self.nca = NeighborhoodComponentsAnalysis(random_state=self.seed, max_iter=50).fit(Z, y)
            Z = self.nca.transform(Z)
        self.Z, self.classes = Z, np.unique(y)
        self.y_code = np.searchsorted(self.classes, y)
        return self

    def _embed(self, X):
        Z = (np.where(np.isnan(X), self.median, X) - self.mu) / self.sd
        return self.nca.transform(Z) if self.nca is not None else Z

    def predict(self, X):
        Z = self._embed(X)
        d = ((Z[:, None, :] - self.Z[None, :, :]) ** 2).sum(axis=2)
        near = np.argsort(d, axis=1, kind="stable")[:, :self.k]
        votes = np.zeros((len(Z), len(self.classes)), int)
        np.add.at(votes, (np.repeat(np.arange(len(Z)), near.shape[1]), self.y_code[near].ravel()), 1)
        return self.classes[np.argmax(votes, axis=1)]


def _cv_accuracies(X, y, splits, n_neighbors, learn_metric, seed):
    acc = []
    for train, test in splits:
        model = _FoldModel(n_neighbors, learn_metric, seed).fit(X[train], y[train])
        acc.append(float(np.mean(model.predict(X[test]) == y[test])))
    return np.array(acc)


def classify(X, y, n_repeats=10, n_permutations=100, seed=0, progress=None):
    """Cross-validated nearest-neighbour accuracy with and without a learned metric.

    Stratified k-fold (k = min(5, smallest group)) repeated ``n_repeats``
    times; the learned metric is scikit-learn's NeighborhoodComponentsAnalysis
    (Goldberger et al. 2005, NIPS 17) fitted inside each training fold.  The
    permutation p-value (Ojala & Garriga 2010, JMLR 11:1833; test 1) refits
    the learned pipeline on ``n_permutations`` label permutations:
    p = (1 + #{permuted score >= true score}) / (1 + n_permutations).
    ``progress`` (callable, optional) is called once per permutation.
    """
    from sklearn.model_selection import RepeatedStratifiedKFold, StratifiedKFold
    y = np.asarray(y)
    X = np.asarray(X, float)
    _, counts = np.unique(y, return_counts=True)
    out = {"chance_accuracy": float(counts.max() / counts.sum())}
    k = int(min(5, counts.min()))
    if k < 2 or X.shape[1] == 0:
        out.update(cv_accuracy=float("nan"), cv_accuracy_sd=float("nan"),
                   cv_accuracy_baseline=float("nan"), cv_accuracy_baseline_sd=float("nan"),
                   permutation_p=float("nan"), cv_folds=k)
        return out
    n_neighbors = int(max(1, min(3, counts.min() - 1)))
    repeated = list(RepeatedStratifiedKFold(n_splits=k, n_repeats=n_repeats,
                                            random_state=seed).split(X, y))
    single = StratifiedKFold(k, shuffle=True, random_state=seed)
    rng = np.random.default_rng(seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        acc_b = _cv_accuracies(X, y, repeated, n_neighbors, False, seed)
        acc_l = _cv_accuracies(X, y, repeated, n_neighbors, True, seed)
        true = _cv_accuracies(X, y, single.split(X, y), n_neighbors, True, seed).mean()
        beaten = 0
        for _ in range(n_permutations):
            yp = rng.permutation(y)
            beaten += _cv_accuracies(X, yp, single.split(X, yp), n_neighbors, True,
                                     seed).mean() >= true
            if progress is not None:
                progress(1)
    out.update(cv_accuracy=float(acc_l.mean()), cv_accuracy_sd=float(acc_l.std(ddof=1)),
               cv_accuracy_baseline=float(acc_b.mean()),
               cv_accuracy_baseline_sd=float(acc_b.std(ddof=1)),
               permutation_p=float((beaten + 1) / (n_permutations + 1)), cv_folds=k,
               cv_repeats=n_repeats, n_permutations=n_permutations,
               classifier=f"{n_neighbors}-nearest neighbours")
    return out


def nca_feature_weights(X, y, names, seed=0):
    """Per-feature weight of the Mahalanobis metric M = A^T A learned by NCA on
    all samples (standardised features): diag(M), normalised to sum 1."""
    from sklearn.impute import SimpleImputer
    from sklearn.neighbors import NeighborhoodComponentsAnalysis
    from sklearn.preprocessing import StandardScaler
    Z = StandardScaler().fit_transform(SimpleImputer(strategy="median").fit_transform(X))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        nca = NeighborhoodComponentsAnalysis(random_state=seed, max_iter=50).fit(Z, y)
    w = np.sum(nca.components_ ** 2, axis=0)
    w = w / w.sum() if w.sum() > 0 else w
    return dict(zip(names, w.tolist())), nca.transform(Z)


def classical_mds(d, k=2):
    """Classical (Torgerson 1952, Psychometrika 17:401) scaling of a distance matrix."""
    d = np.asarray(d, float)
    n = len(d)
    j = np.eye(n) - 1.0 / n
    b = -0.5 * j @ (d ** 2) @ j
    vals, vecs = np.linalg.eigh(b)
    idx = np.argsort(vals)[::-1][:k]
    coords = vecs[:, idx] * np.sqrt(np.maximum(vals[idx], 0))
    # Fix each axis's sign so results do not depend on the eigensolver.
    signs = np.sign(coords[np.argmax(np.abs(coords), axis=0), np.arange(coords.shape[1])])
    return coords * np.where(signs == 0, 1, signs)


def cluster_ari(d, labels):
    """Adjusted Rand index of average-linkage clusters (as many as groups) against the groups."""
    from scipy.cluster.hierarchy import fcluster, linkage
    from scipy.spatial.distance import squareform
    from sklearn.metrics import adjusted_rand_score
    k = len(set(labels))
    z = linkage(squareform(d, checks=False), "average")
    return float(adjusted_rand_score(labels, fcluster(z, k, criterion="maxclust")))


# ------------------------------------------------------------------ compare
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
    norm = _normalised(distances)
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
    fig = plot_dendrogram_heatmap(combined, labels, samples=cohort["sample"].tolist())
    save(fig, folder / "distances.png")
    made["distances"] = "figures/distances.png"
    fig, axes = new_axes(2, 1, size=(3.4, 3.0))
    plot_embedding(before, labels, axes[0, 0], "combined distance (classical MDS)")
    plot_embedding(after, labels, axes[0, 1], "after the learned metric (NCA)")
    save(fig, folder / "embeddings.png")
    made["embeddings"] = "figures/embeddings.png"
    return made
