"""Skeleton graphs of phantoms against their analytic truth."""

import numpy as np
import pytest

import skelmorph as sm
from skelmorph import phantoms as ph


def graph_of(p, **kw):
    return sm.skeleton_graph(p.mask, p.spacing, **kw)


def test_torus_ring_length_and_topology():
    # Analytic: centreline of a torus is a circle of length 2*pi*R; one loop.
    p = ph.torus(major_radius=30, tube_radius=5)
    g = graph_of(p)
    s = sm.summarize(g)
    assert s["total_length"] == pytest.approx(2 * np.pi * 30, rel=0.02)
    assert (s["n_nodes"], s["n_branches"], s["cycle_rank"], s["n_components"]) == (1, 1, 1, 1)
    assert g.edge_kind[0] == "ring"


def test_2d_ring_length():
    # Analytic: circle of radius 40 has length 2*pi*40.
    p = ph.ring2d(radius=40, width=6)
    s = sm.summarize(graph_of(p))
    assert s["total_length"] == pytest.approx(2 * np.pi * 40, rel=0.02)
    assert s["cycle_rank"] == 1 and s["n_tips"] == 0


@pytest.mark.parametrize("direction", [(0, 0, 1), (0, 1, 1), (1, 2, 3), (0, 1, 2), (2, 1, 1)])
def test_straight_tube_not_over_measured(direction):
    # Analytic: a straight centreline's length equals the distance between its
    # ends.  Raw voxel steps cannot beat the shortest 26-connected path, whose
    # length per unit chord is (u1-u2) + sqrt2 (u2-u3) + sqrt3 u3 for sorted
    # direction cosines u (chain-code geometry; Kiryati & Szekely 1993,
    # Pattern Recognit 26:1623), i.e. up to +12.8 % over-measurement.
    p = ph.straight_tube(length=80, radius=4, direction=direction)
    g = graph_of(p)
    assert g.n_edges == 1
    assert g.edge_length[0] / g.edge_chord[0] == pytest.approx(1.0, abs=0.01)
    raw = graph_of(p, smoothing=0)
    u = np.sort(np.abs(np.asarray(direction, float)) / np.linalg.norm(direction))[::-1]
    expected = (u[0] - u[1]) + np.sqrt(2) * (u[1] - u[2]) + np.sqrt(3) * u[2]
    ratio = raw.edge_length[0] / raw.edge_chord[0]
    assert expected - 0.01 <= ratio <= expected + 0.05


def test_flat_tube_with_tip_extension_recovers_object_length():
    # Analytic: a flat-ended cylinder of axis length 80.  Thinning stops about
    # one radius short of each end; extending tips by the tip radius restores it.
    p = ph.straight_tube(length=80, radius=4, direction=(1, 2, 3))
    short = sm.summarize(graph_of(p))["total_length"]
    full = sm.summarize(graph_of(p, extend_tips=True))
    assert short < 80 * 0.95
    assert full["total_length"] == pytest.approx(80, rel=0.03)
    assert full["tip_extension"] is True


def test_bent_tube_length():
    # Analytic: arc of radius 30 over 90 degrees has length 15*pi.  Round caps
    # make the medial axis end at the cap centres; thinning stops a little
    # short of them (methods dossier 4.1), so the tolerance is one-sided.
    p = ph.bent_tube(bend_radius=30, angle=np.pi / 2, radius=4)
    g = graph_of(p)
    assert g.n_edges == 1
    # Each end may sit up to ~3 voxels inside the cap centre (dossier 4.1:
    # "~3 voxels inside the centreline end" on a capsule of radius 4).
    assert 15 * np.pi - 2 * 3 <= g.edge_length.sum() <= 1.01 * 15 * np.pi


def test_helix_length_and_distance_metric():
    # Analytic (helix formulas): L = 2 pi N sqrt(a^2 + c^2), DM = sqrt(1 + (a/c)^2).
    p = ph.helix(a=15, c=5, turns=3, radius=3)
    g = graph_of(p, extend_tips=True)
    assert g.n_edges == 1
    assert g.edge_length[0] == pytest.approx(p.truth["axis_length"], rel=0.03)
    dm = g.edge_length[0] / g.edge_chord[0]
    assert dm == pytest.approx(p.truth["distance_metric"], rel=0.05)


def test_y_bifurcation():
    # As drawn: one fork, three tips, no loop.
    p = ph.y_bifurcation()
    g = graph_of(p)
    s = sm.summarize(g)
    assert (s["n_junctions"], s["n_tips"], s["cycle_rank"]) == (1, 3, 0)
    assert sorted(g.edge_kind) == ["terminal"] * 3
    junction = np.flatnonzero(g.node_degree == 3)[0]
    assert np.linalg.norm(g.nodes[junction] - p.truth["fork"]) < p.truth["radii"][0] * 1.5


@pytest.mark.parametrize("n", [2, 3])
def test_wire_frame(n):
    # Counting argument: N^3 nodes, 3 N^2 (N - 1) rods, loops E - V + 1
    # (cube N=2: graph Q3, 8 nodes, 12 edges, 5 loops).
    p = ph.wire_frame(n_nodes=n)
    s = sm.summarize(graph_of(p))
    t = p.truth
    assert s["n_junctions"] == t["n_junctions"]
    assert s["n_branches"] == t["n_branches"]
    assert s["cycle_rank"] == t["cycle_rank"]
    assert s["n_tips"] == 0
    # Each rod runs between node centres; the graph measures between junction nodes.
    assert s["total_length"] == pytest.approx(t["axis_length"], rel=0.05)


def test_rod_lattice():
    # Counting argument: n^3 junctions of degree 6, 6 n^2 cut ends on the faces,
    # loops 2 n^3 - 3 n^2 + 1.
    p = ph.rod_lattice(n_cells=3, pitch=16, rod_radius=2.5)
    g = graph_of(p)
    s = sm.summarize(g)
    assert s["n_junctions"] == 27
    assert s["cycle_rank"] == 2 * 27 - 3 * 9 + 1
    assert s["n_tips"] == 54
    assert np.all(g.node_degree[g.node_degree >= 3] == 6)


@pytest.mark.parametrize("seed", [0, 3])
def test_random_tree(seed):
    # As drawn: a binary tree with 2^g + 1 tips (leaves and root), 2^g - 1 forks.
    p = ph.random_tree(generations=4, seed=seed)
    s = sm.summarize(graph_of(p))
    assert s["n_tips"] == p.truth["n_tips"]
    assert s["n_junctions"] == p.truth["n_junctions"]
    assert s["cycle_rank"] == 0 and s["n_components"] == 1


def test_venation_loops_and_spurs():
    # As drawn: a grid of 4 x 5 areoles -> 20 independent loops; 3 free spurs -> 3 tips.
    p = ph.venation(cells=(4, 5), n_spurs=3, seed=1)
    s = sm.summarize(graph_of(p))
    assert s["cycle_rank"] == 20
    assert s["n_tips"] == 3
    assert s["total_length"] == pytest.approx(p.truth["axis_length"], rel=0.03)


@pytest.mark.parametrize("name", ["torus", "helix", "y"])
def test_anisotropic_spacing_same_physical_length(name):
    # The same physical object sampled with (2, 1, 1) voxels gives the same
    # length within 2 % (isotropic resampling before thinning).
    iso = sm.summarize(graph_of(ph.make(name, spacing=1.0)))
    aniso = sm.summarize(graph_of(ph.make(name, spacing=(2.0, 1.0, 1.0))))
    assert aniso["total_length"] == pytest.approx(iso["total_length"], rel=0.02 if name != "y" else 0.035)
    for key in ("n_junctions", "n_tips", "cycle_rank"):
        assert aniso[key] == iso[key]


def test_thinned_away_component_is_kept():
    # scikit-image's 3D thinning erases a box of even cross-section entirely;
    # the component must still appear (as an isolated point).
    mask = np.zeros((20, 20, 40), bool)
    mask[6:14, 6:14, 5:35] = True
    s = sm.summarize(sm.skeleton_graph(mask))
    assert s["n_components"] == 1


def test_isolated_point_and_two_components():
    mask = np.zeros((30, 30), bool)
    mask[5, 5] = True
    mask[15, 3:27] = True
    s = sm.summarize(sm.skeleton_graph(mask))
    assert s["n_components"] == 2
    assert s["n_isolated_points"] == 1


def test_edge_arrays_behave_as_a_list_of_arrays():
    # Reference: a plain Python list of numpy arrays under the same edits.
    from skelmorph.rawgraph import EdgeArrays

    rng = np.random.default_rng(0)
    counts = rng.integers(1, 6, 12)
    offsets = np.concatenate([[0], np.cumsum(counts)])
    flat = rng.normal(size=(offsets[-1], 3))
    extra = [rng.normal(size=(4, 3))]
    ours = EdgeArrays(flat, offsets, extra)
    ref = [flat[a:b] for a, b in zip(offsets[:-1], offsets[1:])] + extra
    for step in range(200):
        op = rng.integers(4)
        if op == 0 and len(ref):
            e = int(rng.integers(len(ref)))
            new = rng.normal(size=(int(rng.integers(1, 5)), 3))
            ours[e], ref[e] = new, new
        elif op == 1:
            new = rng.normal(size=(int(rng.integers(1, 5)), 3))
            ours.append(new)
            ref.append(new)
        elif op == 2 and len(ref):
            keep = np.sort(rng.choice(len(ref), int(rng.integers(len(ref) + 1)), replace=False))
            ours, ref = ours.take(keep), [ref[k] for k in keep]
        assert len(ours) == len(ref)
        assert all(np.array_equal(a, b) for a, b in zip(ours, ref))
        assert np.array_equal(ours.lengths(), [len(a) for a in ref])
        empty = np.zeros((0, 3))
        assert np.array_equal(ours.concatenate(empty),
                              np.concatenate(ref) if ref else empty)
    with pytest.raises(IndexError):
        ours[len(ref)]
