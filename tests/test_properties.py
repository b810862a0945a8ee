"""Graph invariants on random unions of tubes (hypothesis)."""

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

import skelmorph as sm
from skelmorph.phantoms import draw_tubes

segment = st.tuples(*[st.floats(4, 36) for _ in range(6)], st.floats(1.2, 3.0))


@given(st.lists(segment, min_size=1, max_size=5))
def test_invariants_of_random_tubes(segs):
    starts = np.array([s[:3] for s in segs])
    ends = np.array([s[3:6] for s in segs])
    radii = np.array([s[6] for s in segs])
    mask = draw_tubes((40, 40, 40), (1.0, 1.0, 1.0), starts, ends, radii)
    if not mask.any():
        return
    g = sm.skeleton_graph(mask)
    s = sm.summarize(g)
    # Handshake lemma: degrees sum to twice the number of edges.
    assert g.node_degree.sum() == 2 * g.n_edges
    assert s["cycle_rank"] == g.n_edges - g.n_nodes + s["n_components"] >= 0
    assert np.all(g.edge_length > 0)
    assert np.all(g.point_radius > 0)
    # Polylines start and end at their nodes.
    np.testing.assert_allclose(g.points[g.offsets[:-1]], g.nodes[g.edges[:, 0]], atol=1e-9)
    np.testing.assert_allclose(g.points[g.offsets[1:] - 1], g.nodes[g.edges[:, 1]], atol=1e-9)
    # Node order is irrelevant: relabelling nodes changes no summary value.
    perm = np.random.default_rng(0).permutation(g.n_nodes)
    inv = np.argsort(perm)
    from dataclasses import replace
    h = replace(g, nodes=g.nodes[perm], node_radius=g.node_radius[perm],
                node_degree=g.node_degree[perm], edges=inv[g.edges])
    def same(d):
        return {k: ("nan" if isinstance(v, float) and v != v else v) for k, v in d.items()}

    assert same(sm.summarize(h)) == same(s)


@given(st.integers(0, 2**16))
def test_smoothing_keeps_lines_and_ends(seed):
    from skelmorph.polyline import smooth_polylines

    rng = np.random.default_rng(seed)
    n = rng.integers(2, 30)
    d = rng.normal(size=3)
    line = np.outer(np.arange(n), d) + rng.normal(size=3)
    offsets = np.array([0, n])
    out = smooth_polylines(line, offsets, sigma=2.0)
    # Point reflection about the ends maps a straight line to itself.
    np.testing.assert_allclose(out, line, atol=1e-9)


def _smooth_reference(points, offsets, sigma, closed):
    """Each polyline padded explicitly (reflected or wrapped), then filtered by
    scipy.ndimage.correlate1d (general-purpose reference)."""
    from scipy import ndimage as ndi
    half = int(np.ceil(3 * sigma))
    x = np.arange(-half, half + 1)
    kernel = np.exp(-0.5 * (x / sigma) ** 2)
    kernel /= kernel.sum()
    out = []
    for e in range(len(offsets) - 1):
        p = points[offsets[e]:offsets[e + 1]]
        n = len(p)
        if closed[e]:
            m = max(n - 1, 1)
            padded = np.array([p[j % m] for j in range(-half, n + half)])
        else:
            def at(j):
                if 0 <= j < n:
                    return p[j]
                if j < 0:  # point reflection about the first point
                    return 2 * p[0] - at(-j)
                return 2 * p[-1] - at(2 * (n - 1) - j)
            padded = np.array([at(j) for j in range(-half, n + half)]) if n > 1 else \
                np.repeat(p[:1], n + 2 * half, axis=0)
        sm_ = ndi.correlate1d(padded, kernel, axis=0, mode="nearest")[half:half + n]
        if closed[e]:
            sm_[-1] = sm_[0]
        else:
            sm_[0], sm_[-1] = p[0], p[-1]
        out.append(sm_)
    return np.concatenate(out)


@given(st.integers(0, 2**16), st.sampled_from([0.7, 2.0, 3.5]))
def test_smoothing_equals_explicit_padding_and_scipy(seed, sigma):
    from skelmorph.polyline import smooth_polylines

    rng = np.random.default_rng(seed)
    counts = rng.integers(1, 25, size=6)
    offsets = np.concatenate([[0], np.cumsum(counts)])
    points = rng.normal(size=(offsets[-1], 3)).cumsum(axis=0)
    closed = (rng.random(6) < 0.3) & (counts > 3)
    for e in np.flatnonzero(closed):  # a closed polyline ends where it starts
        points[offsets[e + 1] - 1] = points[offsets[e]]
    np.testing.assert_allclose(smooth_polylines(points, offsets, sigma, closed=closed),
                               _smooth_reference(points, offsets, sigma, closed), atol=1e-9)


@given(st.integers(0, 2**16), st.sampled_from([2, 3]))
def test_polyline_lengths_equal_numpy_sums(seed, d):
    # numpy (general-purpose reference): per-polyline sums of np.linalg.norm
    # over the point differences; and, bit for bit, the differences of the
    # running arc length at each polyline's ends, which the compiled pass
    # reproduces (graphs built before and after it are identical).
    from skelmorph.polyline import cumulative_arclength, polyline_lengths

    rng = np.random.default_rng(seed)
    counts = rng.integers(1, 25, size=8)
    offsets = np.concatenate([[0], np.cumsum(counts)])
    points = rng.normal(size=(offsets[-1], d)).cumsum(axis=0) * 10 + 1000
    got = polyline_lengths(points, offsets)
    steps = np.linalg.norm(np.diff(points, axis=0), axis=1)
    expect = [steps[a:b - 1].sum() for a, b in zip(offsets[:-1], offsets[1:])]
    np.testing.assert_allclose(got, expect, rtol=1e-12, atol=1e-9)
    s = cumulative_arclength(points, offsets)
    assert np.array_equal(got, s[offsets[1:] - 1] - s[offsets[:-1]])
    from skelmorph.polyline import point_steps
    step = np.zeros(len(points))
    step[1:] = steps
    step[offsets[:-1]] = 0.0
    assert np.array_equal(point_steps(points, offsets), step)


@given(st.integers(0, 2**16), st.sampled_from([(9, 11), (6, 7, 8)]), st.floats(0.1, 0.9))
def test_sparse_euler_characteristic_matches_scikit_image(seed, shape, density):
    # scikit-image's euler_number (general-purpose reference), full connectivity.
    from skimage.measure import euler_number

    from skelmorph.voxels import euler_characteristic

    mask = np.random.default_rng(seed).random(shape) < density
    assert euler_characteristic(np.argwhere(mask), shape) == euler_number(mask, connectivity=len(shape))
