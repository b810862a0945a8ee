"""Sliced Wasserstein distance between barcodes, the vectorised silhouette and
the cross-validated classifier used by the cohort comparison."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from skelmorph.cohort.distances import silhouette as _silhouette
from skelmorph.cohort.models import classify
from skelmorph.descriptors.distances import (sliced_wasserstein_distance,
                                             sliced_wasserstein_matrix, wasserstein_distance)
from skelmorph.errors import InputError

gudhi = pytest.importorskip("gudhi")


@st.composite
def diagrams(draw, max_points=12):
    n = draw(st.integers(0, max_points))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    d = rng.uniform(0, 10, (n, 2))
    return np.sort(d, axis=1)


def test_single_point_against_empty_is_closed_form():
    """Analytic: from the definition (Carriere, Cuturi & Oudot 2017, ICML,
    eq. 3), a point (b, d) against nothing is (d - b)/2 * (1/pi) * integral of
    |sin t - cos t| over [-pi/2, pi/2] = sqrt(2) (d - b) / pi."""
    for b, d in [(0.0, 1.0), (2.0, 7.5), (-3.0, 4.0)]:
        got = sliced_wasserstein_distance([[b, d]], [], n_directions=400)
        assert got == pytest.approx(np.sqrt(2) * (d - b) / np.pi, rel=1e-5)


@settings(max_examples=40, deadline=None)
@given(diagrams(), diagrams())
def test_upper_bound_by_exact_wasserstein(a, b):
    """Upper bound of Carriere et al. 2017, Theorem 3.3: SW <= 2 sqrt(2) W1
    (L-infinity ground); and SW <= 2 W1 with the Euclidean ground, the exact
    distance from gudhi's hera (reference library)."""
    from gudhi.hera import wasserstein_distance as hera
    sw = sliced_wasserstein_distance(a, b, n_directions=100)
    assert sw <= 2 * np.sqrt(2) * wasserstein_distance(a, b, 1) + 1e-9
    assert sw <= 2 * hera(a, b, order=1, internal_p=2) + 1e-6
    assert sw >= 0
    assert sliced_wasserstein_distance(b, a, n_directions=100) == pytest.approx(sw)


@settings(max_examples=25, deadline=None)
@given(diagrams(), diagrams())
def test_equals_gudhi_sliced_wasserstein(a, b):
    """Reference library: gudhi.representations.SlicedWassersteinDistance (left
    endpoint rule) and ours (midpoint rule) converge to the same integral."""
    from gudhi.representations.metrics import SlicedWassersteinDistance
    ref = SlicedWassersteinDistance(num_directions=4000).fit([a]).transform([b])[0, 0]
    assert sliced_wasserstein_distance(a, b, n_directions=4000) == pytest.approx(ref, rel=2e-3,
                                                                                abs=1e-6)


@settings(max_examples=20, deadline=None)
@given(diagrams(), diagrams(), diagrams())
def test_triangle_inequality_and_identity(a, b, c):
    """Common practice: SW is a pseudo-metric (identity, symmetry, triangle)."""
    d = sliced_wasserstein_matrix([a, b, c], n_directions=30)
    assert np.allclose(np.diag(d), 0)
    assert np.allclose(d, d.T)
    assert d[0, 2] <= d[0, 1] + d[1, 2] + 1e-9


def test_matrix_equals_pairs_and_essential_points():
    rng = np.random.default_rng(3)
    ds = [np.sort(rng.uniform(0, 5, (k, 2)), axis=1) for k in (0, 3, 8)]
    ds.append(np.vstack([ds[2], [[1.0, np.inf]]]))
    ds.append(np.vstack([ds[2], [[2.5, np.inf]]]))
    m = sliced_wasserstein_matrix(ds, n_directions=20)
    for i in range(len(ds)):
        for j in range(len(ds)):
            if i != j:
                assert m[i, j] == pytest.approx(sliced_wasserstein_distance(ds[i], ds[j], 20))
    assert m[3, 4] == pytest.approx(1.5)          # same finite part, essential 1.0 vs 2.5
    assert np.isinf(m[2, 3])                      # unequal numbers of essential points
    with pytest.raises(InputError, match="n_directions"):
        sliced_wasserstein_distance([[0, 1]], [], n_directions=0)


def test_silhouette_equals_scikit_learn():
    """Reference library: sklearn.metrics.silhouette_score (precomputed)."""
    from scipy.spatial.distance import pdist, squareform
    from sklearn.metrics import silhouette_score
    rng = np.random.default_rng(1)
    for _ in range(10):
        x = rng.normal(size=(17, 3))
        labels = rng.integers(0, 3, 17)
        labels[0] = 3                              # a group of one sample
        d = squareform(pdist(x))
        assert _silhouette(d, labels) == pytest.approx(
            silhouette_score(d, labels, metric="precomputed"), abs=1e-12)


def test_classifier_equals_scikit_learn_pipeline():
    """Reference library: the baseline accuracy per fold equals scikit-learn's
    imputer + scaler + KNeighborsClassifier pipeline on the same splits."""
    from sklearn.impute import SimpleImputer
    from sklearn.model_selection import RepeatedStratifiedKFold, cross_val_score
    from sklearn.neighbors import KNeighborsClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    rng = np.random.default_rng(0)
    y = np.repeat(["a", "b"], 9)
    x = rng.normal(size=(18, 6)) + (y == "b")[:, None] * 0.8
    x[3, 2] = np.nan
    ref = cross_val_score(make_pipeline(SimpleImputer(strategy="median"), StandardScaler(),
                                        KNeighborsClassifier(n_neighbors=3)), x, y,
                          cv=RepeatedStratifiedKFold(n_splits=5, n_repeats=3, random_state=0))
    out = classify(x, y, n_repeats=3, n_permutations=19, seed=0)
    assert out["cv_accuracy_baseline"] == pytest.approx(ref.mean())
    # Permutation p-value (Ojala & Garriga 2010): (1 + k) / (1 + n), k in 0..n.
    assert out["permutation_p"] * 20 == pytest.approx(round(out["permutation_p"] * 20))
    assert 1 / 20 <= out["permutation_p"] <= 1


def test_classifier_separable_and_label_free():
    """Well separated groups are classified perfectly with p at its floor;
    labels unrelated to the data give p well above it."""
    rng = np.random.default_rng(2)
    y = np.repeat(["a", "b"], 8)
    x = rng.normal(size=(16, 4)) + (y == "b")[:, None] * 10
    out = classify(x, y, n_repeats=2, n_permutations=30, seed=0)
    assert out["cv_accuracy"] == 1.0 and out["permutation_p"] == pytest.approx(1 / 31)
    noise = classify(rng.normal(size=(16, 4)), y, n_repeats=2, n_permutations=30, seed=0)
    assert noise["permutation_p"] > 0.1
