"""Poiseuille flow on networks (skelmorph.measure.flow) against analytic
answers and a dense solve of the same Kirchhoff system."""

import networkx as nx
import numpy as np
import pytest

import skelmorph as sm
from skelmorph import SkeletonGraph
from skelmorph.errors import InputError
from skelmorph.measure.flow import flow_measures, network_flow

from conftest import binary_tree_layout


def poiseuille_resistance(r, length, mu=1.0):
    """Hagen-Poiseuille: R = 8 mu L / (pi r^4) (e.g. Sutera & Skalak 1993)."""
    return 8 * mu * np.asarray(length) / (np.pi * np.asarray(r) ** 4)


def test_tubes_in_series_add_resistances():
    """Analytic: resistances in series add."""
    lengths, radii = [3.0, 5.0, 2.0], [1.0, 0.5, 2.0]
    x = np.concatenate([[0], np.cumsum(lengths)])
    g = SkeletonGraph.from_edges(np.column_stack([np.zeros(4), x]), [[0, 1], [1, 2], [2, 3]])
    out = network_flow(g, [0], [3], radius=radii, viscosity=2.0, pressure_in=5.0,
                       pressure_out=1.0)
    total_r = poiseuille_resistance(radii, lengths, mu=2.0).sum()
    assert out["network_conductance"] == pytest.approx(1 / total_r, rel=1e-12)
    assert out["total_flow"] == pytest.approx(4.0 / total_r, rel=1e-12)
    assert np.allclose(out["flow"], out["total_flow"])          # one stream
    assert out["pressure"][1] == pytest.approx(5 - out["total_flow"] *
                                               poiseuille_resistance(1.0, 3.0, 2.0))


def test_tubes_in_parallel_add_conductances():
    """Analytic: conductances in parallel add (three branches between two
    nodes, one of them a bent polyline of known length)."""
    bent = np.array([[0.0, 0.0], [2.0, 2.0], [4.0, 0.0]])
    g = SkeletonGraph.from_edges([[0, 0], [4, 0]], [[0, 1], [0, 1], [1, 0]],
                                 polylines=[np.array([[0.0, 0], [4, 0]]), bent,
                                            np.array([[4.0, 0], [0, 0]])])
    r = np.array([1.0, 1.5, 0.7])
    out = network_flow(g, [0], [1], radius=r)
    lengths = [4.0, 4 * np.sqrt(2), 4.0]
    assert out["network_conductance"] == pytest.approx(
        (1 / poiseuille_resistance(r, lengths)).sum(), rel=1e-12)


def _binary_tree(depth, r0, l0, r_ratio, l_ratio):
    """Symmetric binary tree: generation k has 2^k branches of radius
    r0 r_ratio^k and length l0 l_ratio^k (a stem first)."""
    parent, coords, radius, _ = binary_tree_layout(depth, lambda k: r0 * r_ratio ** k,
                                                   lambda k: l0 * l_ratio ** k)
    edges = np.array([[p, i] for i, p in enumerate(parent) if p >= 0])
    g = SkeletonGraph.from_edges(np.array(coords), edges)
    return g, np.array(radius)[edges[:, 1]], g.edge_length


def test_symmetric_binary_tree_closed_form():
    """Closed form: R = sum over generations k of R_k / 2^k."""
    depth, r0, l0, rr, lr = 5, 2.0, 10.0, 0.75, 0.8
    g, radii, lengths = _binary_tree(depth, r0, l0, rr, lr)
    tips = np.flatnonzero(g.node_degree == 1)
    tips = tips[tips != 0]
    out = network_flow(g, [0], tips, radius=radii)
    expected = sum(poiseuille_resistance(r0 * rr ** k, l0 * lr ** k) / 2 ** k
                   for k in range(depth + 1))
    assert 1 / out["network_conductance"] == pytest.approx(expected, rel=1e-10)


def test_murray_tree_has_equal_wall_shear_stress():
    """Murray (1926): with r_parent^3 = sum r_child^3, flow splits as r^3 and
    the wall shear stress 4 mu q / (pi r^3) is the same in every branch."""
    g, radii, lengths = _binary_tree(6, 3.0, 12.0, 2 ** (-1 / 3), 0.7)
    tips = np.flatnonzero(g.node_degree == 1)
    out = network_flow(g, [0], tips[tips != 0], radius=radii)
    tau = 4 * np.abs(out["flow"]) / (np.pi * radii ** 3)
    assert np.allclose(tau, tau[0], rtol=1e-9)


@pytest.mark.parametrize("seed", range(8))
def test_equals_dense_solve_of_the_same_system(seed):
    """Reference libraries: networkx's weighted Laplacian solved densely by numpy."""
    rng = np.random.default_rng(seed)
    G = nx.connected_watts_strogatz_graph(30, 4, 0.3, seed=seed)
    pos = rng.uniform(0, 20, (30, 3))
    edges = np.array(list(G.edges()))
    r = rng.uniform(0.5, 2.0, len(edges))
    g = SkeletonGraph.from_edges(pos, edges)
    inlets, outlets = [0, 1], [17, 23, 29]
    out = network_flow(g, inlets, outlets, radius=r, pressure_in=2.0, pressure_out=-1.0)
    cond = np.pi * r ** 4 / (8 * g.edge_length)
    for (a, b), c in zip(edges, cond):
        G[a][b]["weight"] = c
    lap = nx.laplacian_matrix(G, nodelist=range(30), weight="weight").toarray()
    fixed = np.zeros(30, bool)
    fixed[inlets + outlets] = True
    p = np.zeros(30)
    p[inlets], p[outlets] = 2.0, -1.0
    p[~fixed] = np.linalg.solve(lap[np.ix_(~fixed, ~fixed)], -lap[np.ix_(~fixed, fixed)] @ p[fixed])
    assert np.allclose(out["pressure"], p, atol=1e-10)
    inflow = (lap @ p)[inlets].sum()                 # net current into the network
    assert out["total_flow"] == pytest.approx(inflow, rel=1e-9)


def test_bad_flow_inputs_are_refused():
    g = SkeletonGraph.from_edges([[0, 0], [0, 1], [5, 5], [5, 6]], [[0, 1], [2, 3]])
    with pytest.raises(InputError, match="disconnected"):
        network_flow(g, [0], [3], radius=[1.0, 1.0])
    with pytest.raises(InputError, match="both an inlet and an outlet"):
        network_flow(g, [0], [0, 1], radius=[1.0, 1.0])
    with pytest.raises(InputError, match="at least one inlet"):
        network_flow(g, [], [1], radius=[1.0, 1.0])
    with pytest.raises(InputError, match="no other free end"):
        flow_measures(SkeletonGraph.from_edges([[0, 0], [0, 1], [1, 1]], [[0, 1], [1, 2],
                                                                          [2, 0]]), 0)


def test_flow_in_the_vessel_set():
    """analyze --measures vessel adds the flow scalars with units and the
    per-branch flow columns; on a Y built to Murray's law the two daughters
    share the flow about equally (phantom construction)."""
    ph = sm.phantoms.make("y")
    res = sm.analyze(ph.mask, ph.spacing, measures="vessel", n_radii=0, tree=None,
                     figures=False)
    s = res.summary
    assert s["flow_outlets"] == 2 and s["units"]["flow_conductance"] == "um^3"
    assert 0.45 < s["flow_top_outlet_share"] < 0.6
    assert s["flow_conductance"] > 0 and s["flow_resistance"] == pytest.approx(
        1 / s["flow_conductance"])
