"""Vectorised descriptors of each sample and the models fitted on them:
cross-validated nearest-neighbour classification with and without a learned
metric, its permutation test, NCA feature weights, classical scaling and
clustering agreement."""

from __future__ import annotations

import warnings

import numpy as np

from ..descriptors.barcode import diagrams_from_table
from .distances import PROFILE_DESCRIPTORS, profile_grid
from .study import scalar_measures

__all__ = ["feature_matrix", "classify", "nca_feature_weights", "classical_mds", "cluster_ari"]


#: Features missing (NaN) in more than this share of the samples are left out.
MAX_MISSING_SHARE = 0.25


def feature_matrix(study):
    """Vectorised descriptors of every sample: scalar measures, profiles on a
    coarse common grid, persistence images, log path counts.

    Returns
    -------
    X : (n, p) float array (NaN where missing; features missing in more than
        ``MAX_MISSING_SHARE`` of the samples are left out)
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
                y, grid = profile_grid(prof, samples, col, n_grid=16)
                blocks.append(y)
                names += [f"profile:{col}@{r:.3g}" for r in grid]
    bars = study["barcodes"]
    if bars is not None and len(bars):
        from ..descriptors.persistence_images import PersistenceImager
        diagrams = diagrams_from_table(bars, samples)
        if any(len(x) for x in diagrams):
            pim = PersistenceImager(resolution=(6, 6))
            blocks.append(pim.fit_transform(diagrams))
            names += [f"persistence_image[{i},{j}]" for i in range(6) for j in range(6)]
    X = np.hstack(blocks) if blocks else np.zeros((len(samples), 0))
    # A measure undefined in many samples (a plate thickness where there are
    # no plates) is left out: imputing it would invent values for them.
    with np.errstate(invalid="ignore"):
        keep = (np.nanstd(X, axis=0) > 0) & (np.isnan(X).mean(axis=0) <= MAX_MISSING_SHARE)
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
