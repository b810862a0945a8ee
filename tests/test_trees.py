"""Roots, spanning trees, elder-rule barcodes, Strahler orders, diagram distances."""

import itertools

import networkx as nx
import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats

import skelmorph as sm
from skelmorph import (SkeletonGraph, Tree, barcode, bifurcation_ratio, bottleneck_distance,
                       choose_root, count_spanning_trees, spanning_trees, strahler_order,
                       wasserstein_distance)
from skelmorph.errors import InputError
from skelmorph.rooting import _tree_edges

gudhi = pytest.importorskip("gudhi")


# ----------------------------------------------------------------- helpers
@st.composite
def random_trees(draw, max_points=40, ndim=3, outward=False):
    """Random trees: point i > 0 hangs from a random earlier point."""
    n = draw(st.integers(2, max_points))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    parent = np.full(n, -1)
    coords = np.zeros((n, ndim))
    for i in range(1, n):
        parent[i] = rng.integers(0, i)
        step = rng.normal(size=ndim)
        if outward:
            # Keep the distance to the root growing by at least 1 per step.
            base = coords[parent[i]]
            direction = base / np.linalg.norm(base) if np.linalg.norm(base) > 0 else step
            step = direction / np.linalg.norm(direction) * rng.uniform(1.5, 3) + 0.2 * step
        coords[i] = coords[parent[i]] + step
    # Shuffle the numbering so that no test relies on parents preceding children.
    perm = rng.permutation(n)
    inv = np.argsort(perm)
    new_parent = np.where(parent[perm] >= 0, inv[np.maximum(parent[perm], 0)], -1)
    return Tree.from_parents(new_parent, coords[perm])


def gudhi_superlevel_bars(tree, f):
    """0-dim super-level persistence of f on the tree (vertices at f, edges at min)."""
    st_ = gudhi.SimplexTree()
    for i, v in enumerate(f):
        st_.insert([i], filtration=-v)
    for i, p in enumerate(tree.parent):
        if p >= 0:
            st_.insert([i, int(p)], filtration=-min(f[i], f[p]))
    st_.compute_persistence(min_persistence=-1)
    out = []
    for dim, (b, d) in st_.persistence(min_persistence=-1):
        if dim == 0:
            out.append((-b, -d if np.isfinite(d) else f[tree.root]))
    return np.array(out).reshape(-1, 2)


def nonzero(bars):
    bars = np.asarray(bars).reshape(-1, 2)
    keep = np.abs(bars[:, 0] - bars[:, 1]) > 1e-12
    b = bars[keep]
    return b[np.lexsort((b[:, 1], b[:, 0]))]


def line_graph(n_nodes_edges):
    return SkeletonGraph.from_edges(*n_nodes_edges)


# ------------------------------------------------------- hand-derived trees
def test_y_tree_path_and_radial():
    """Y with stem 35 and two daughters of 60 at +-30 degrees, root at the stem base.

    Path: both tips at 35 + 60 = 95; they meet at the junction (f = 35): one
    bar (95, 35), the survivor ends at the root (95, 0).  Oracle 22 of the
    methods dossier (derived by hand).  Radial: each tip is at distance
    |(35, 0) + 60 (cos 30, sin 30)| = sqrt((35 + 51.96)^2 + 30^2) = 91.99 from
    the root; the same pairing gives (91.99, 35) and (91.99, 0).
    """
    a = np.deg2rad(30)
    t = Tree.from_parents([-1, 0, 1, 1], [[0, 0], [35, 0], [35 + 60 * np.cos(a), 60 * np.sin(a)],
                                           [35 + 60 * np.cos(a), -60 * np.sin(a)]])
    np.testing.assert_allclose(barcode(t, "path"), [[95, 35], [95, 0]])
    r = np.hypot(35 + 60 * np.cos(a), 60 * np.sin(a))
    np.testing.assert_allclose(barcode(t, "radial"), [[r, 35], [r, 0]])


def test_asymmetric_tree_by_hand():
    """Root 0 at the origin; junction A at (10, 0); from A a tip at (10, 5)
    (path 15) and a junction B at (20, 0) (path 20); from B tips at (20, 8)
    (path 28) and (30, 0) (path 30).

    Elder rule on path distance: at B the 28-tip dies: (28, 20).  At A the
    survivor (30) meets the 15-tip: (15, 10).  At the root: (30, 0).
    Radial: tips at |(10,5)| = 11.18, |(20,8)| = 21.54, 30; B at 20, A at 10:
    (21.54, 20), (11.18, 10), (30, 0).
    """
    coords = [[0, 0], [10, 0], [10, 5], [20, 0], [20, 8], [30, 0]]
    t = Tree.from_parents([-1, 0, 1, 1, 3, 3], coords)
    np.testing.assert_allclose(barcode(t, "path"), [[30, 0], [28, 20], [15, 10]])
    np.testing.assert_allclose(barcode(t, "radial"),
                               [[30, 0], [np.hypot(20, 8), 20], [np.hypot(10, 5), 10]])
    # Axis filtration along the first axis: tips at 10, 20, 30; B at 20, A at 10.
    np.testing.assert_allclose(barcode(t, "axis", axis=(1, 0)), [[30, 0], [20, 20], [10, 10]])


def test_star_and_cycle_oracles():
    """Methods dossier 6.5: star with rays l_i gives bars (l_i, 0); the
    shortest-path tree of a cycle of circumference C rooted on it gives two
    bars (C/2, 0) (derived by hand)."""
    lengths = [3.0, 5.0, 7.0, 11.0]
    ang = np.linspace(0, 2 * np.pi, 5)[:-1]
    coords = np.vstack([[0, 0], np.column_stack([np.cos(ang), np.sin(ang)]) * np.array(lengths)[:, None]])
    t = Tree.from_parents([-1, 0, 0, 0, 0], coords)
    np.testing.assert_allclose(barcode(t, "path"), [[11, 0], [7, 0], [5, 0], [3, 0]])
    # A hexagon of side 1: circumference 6.
    k = 6
    ang = 2 * np.pi * np.arange(k) / k
    nodes = np.column_stack([np.cos(ang), np.sin(ang)])
    g = SkeletonGraph.from_edges(nodes, [(i, (i + 1) % k) for i in range(k)])
    tree = spanning_trees(g, root=0, method="shortest")[0]
    np.testing.assert_allclose(barcode(tree, "path"), [[3, 0], [3, 0]], atol=1e-12)


# ----------------------------------------------- barcodes: general properties
@given(random_trees())
def test_path_barcode_is_superlevel_persistence(tree):
    """Path distance increases along every root-to-leaf path, so the
    elder-rule barcode equals 0-dim super-level persistence (gudhi, a
    general-purpose reference)."""
    f = tree.path_distance
    ours = barcode(tree, "path")
    ref = gudhi_superlevel_bars(tree, f)
    np.testing.assert_allclose(nonzero(ours), nonzero(ref), atol=1e-9)


@given(random_trees(), st.integers(0, 2**31 - 1))
def test_increasing_array_filtration_matches_gudhi(tree, seed):
    """Any filtration that increases from parent to child (gudhi reference)."""
    rng = np.random.default_rng(seed)
    step = rng.uniform(0.0, 2.0, tree.n_points)
    from skelmorph._kernels import accumulate_down
    f = accumulate_down(tree.order, tree.parent, step)
    np.testing.assert_allclose(nonzero(barcode(tree, f)), nonzero(gudhi_superlevel_bars(tree, f)),
                               atol=1e-9)


@given(random_trees())
def test_bar_count_and_total_length(tree):
    """One bar per tip; for path, sum(birth - death) = total length (design section 4)."""
    bars = barcode(tree, "path")
    assert len(bars) == len(tree.tips)
    assert np.isclose(np.sum(bars[:, 0] - bars[:, 1]), tree.total_length, rtol=1e-9)


@given(random_trees(), st.integers(0, 2**31 - 1))
def test_relabelling_and_rigid_motion_change_nothing(tree, seed):
    rng = np.random.default_rng(seed)
    perm = rng.permutation(tree.n_points)
    inv = np.argsort(perm)
    parent = np.where(tree.parent[perm] >= 0, inv[np.maximum(tree.parent[perm], 0)], -1)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    moved = Tree.from_parents(parent, tree.coords[perm] @ q.T + rng.normal(size=3) * 100)
    for f in ("path", "radial"):
        np.testing.assert_allclose(barcode(moved, f), barcode(tree, f), atol=1e-8)


@given(random_trees(outward=True), st.floats(0.01, 0.3), st.integers(0, 2**31 - 1))
def test_radial_barcode_stability(tree, eps, seed):
    """Moving every point by at most eps moves each radial value by at most
    2 eps; on trees that grow outward (radial distance increasing along
    every path, kept after the move since steps exceed 1) the elder-rule
    barcode is super-level persistence, so by the stability theorem
    (Cohen-Steiner, Edelsbrunner & Harer 2007, Discrete Comput Geom 37:103)
    the bottleneck distance is at most 2 eps."""
    rng = np.random.default_rng(seed)
    d = rng.normal(size=tree.coords.shape)
    d *= eps * rng.uniform(0, 1, (len(d), 1)) / np.linalg.norm(d, axis=1, keepdims=True)
    moved = Tree.from_parents(tree.parent, tree.coords + d)
    assert bottleneck_distance(barcode(tree, "radial"), barcode(moved, "radial")) <= 2 * eps + 1e-9


def test_tie_rule_uses_geometry():
    """Two tips at equal value: the tip first in position order survives,
    whatever the numbering (geometry-only tie rule)."""
    coords = np.array([[0, 0], [1, 0], [1, 1], [1, -1.0]])
    for order in ([0, 1, 2, 3], [0, 1, 3, 2]):
        c = coords[order]
        bars, leaves = barcode(Tree.from_parents([-1, 0, 1, 1], c), "radial", return_leaves=True)
        survivor = c[leaves[np.argmin(bars[:, 1])]]
        np.testing.assert_array_equal(survivor, [1, -1])


# ------------------------------------------------------------- distances
def _bottleneck_by_assignment(a, b):
    """Exact bottleneck distance, independently: the smallest candidate cost t
    for which the (diagram + diagonal) bipartite graph restricted to costs <= t
    has a perfect matching (scipy.optimize.linear_sum_assignment on 0/1 costs)."""
    from scipy.optimize import linear_sum_assignment
    na, nb = len(a), len(b)
    size = na + nb
    cost = np.full((size, size), np.inf)
    if na and nb:
        cost[:na, :nb] = np.abs(a[:, None, :] - b[None, :, :]).max(axis=2)
    cost[np.arange(na), nb + np.arange(na)] = (a[:, 1] - a[:, 0]) / 2
    cost[na + np.arange(nb), np.arange(nb)] = (b[:, 1] - b[:, 0]) / 2
    cost[na:, nb:] = 0.0
    for t in np.unique(cost[np.isfinite(cost)]):
        bad = (cost > t).astype(float)
        r, c = linear_sum_assignment(bad)
        if bad[r, c].sum() == 0:
            return float(t)
    return 0.0


@given(st.integers(0, 2**31 - 1), st.integers(0, 12), st.integers(0, 12))
def test_diagram_distances_match_gudhi(seed, n, m):
    """Bottleneck against an exact assignment-based reference (scipy), and 1-,
    2-Wasserstein against gudhi.hera.wasserstein_distance, both with the
    L-infinity ground metric."""
    from gudhi.hera import wasserstein_distance as hera_w
    rng = np.random.default_rng(seed)
    b1, b2 = rng.uniform(0, 10, n), rng.uniform(0, 10, m)
    a = np.column_stack([b1, b1 + rng.exponential(2, n)])
    b = np.column_stack([b2, b2 + rng.exponential(2, m)])
    # gudhi.bottleneck_distance (3.13) is not the reference: on seed 1,
    # n = 3, m = 4 it returns 1.4210 in both modes where every partial
    # matching enumerated gives 1.2276 (test_bottleneck_against_brute_force).
    assert bottleneck_distance(a, b) == pytest.approx(_bottleneck_by_assignment(a, b), abs=1e-9)
    for p in (1, 2):
        ref = hera_w(a, b, order=p, internal_p=np.inf, delta=1e-7)
        assert wasserstein_distance(a, b, p) == pytest.approx(ref, rel=1e-5, abs=1e-9)


def test_bottleneck_against_brute_force():
    """All partial matchings enumerated (4 vs 3 points); this case exposed
    the disagreement with gudhi's e=0 mode noted above."""
    a = np.array([[4.85835359, 7.78996342], [8.89487834, 11.1433534],
                  [9.34043516, 13.136536], [3.57795197, 4.77593592]])
    b = np.array([[3.91619001, 5.40783498], [8.90274352, 9.11486763], [2.27157594, 5.56547072]])

    def linf(p, q):
        return np.max(np.abs(p - q))

    best = np.inf
    for k in range(4):
        for sa in itertools.combinations(range(4), k):
            for sb in itertools.permutations(range(3), k):
                cost = [linf(a[i], b[j]) for i, j in zip(sa, sb)]
                cost += [abs(a[i, 1] - a[i, 0]) / 2 for i in range(4) if i not in sa]
                cost += [abs(b[j, 1] - b[j, 0]) / 2 for j in range(3) if j not in sb]
                best = min(best, max(cost))
    assert bottleneck_distance(a, b) == pytest.approx(best, abs=1e-12)
    # A second case where gudhi 3.13's default mode also disagrees with
    # enumeration (1.4210 there; 1.2276 here and by enumeration).
    rng = np.random.default_rng(1)
    b1, b2 = rng.uniform(0, 10, 3), rng.uniform(0, 10, 4)
    a = np.column_stack([b1, b1 + rng.exponential(2, 3)])
    b = np.column_stack([b2, b2 + rng.exponential(2, 4)])
    assert bottleneck_distance(a, b) == pytest.approx(1.2276110250549355, abs=1e-12)
    assert _bottleneck_by_assignment(a, b) == pytest.approx(1.2276110250549355, abs=1e-12)


def test_essential_points_and_landscape():
    """Infinite bars match among themselves; a single bar's first landscape
    is a tent of height (death - birth)/2 (Bubenik 2015, JMLR 16:77, def. 3)."""
    assert bottleneck_distance([[1, np.inf]], [[2, np.inf], [0, 1]]) == 1.0
    assert wasserstein_distance([[1, np.inf]], [[2, np.inf], [0, 1]]) == 1.5
    assert bottleneck_distance([[1, np.inf]], [[0, 1]]) == np.inf
    grid = np.linspace(0, 10, 101)
    lam = sm.landscape([[2.0, 6.0]], grid, k=2)
    assert lam[0].max() == pytest.approx(2.0) and grid[np.argmax(lam[0])] == pytest.approx(4.0)
    assert np.all(lam[1] == 0)


def test_persistence_image_integrals():
    """Pixel values are exact integrals: compare one pixel with numerical
    quadrature (scipy.integrate.dblquad), and the total mass with the sum of
    weights when the grid covers many sigmas (analytic)."""
    from scipy.integrate import dblquad
    bars = np.array([[5.0, 1.0], [3.0, 2.0], [8.0, 0.0]])
    pim = sm.PersistenceImager(resolution=(10, 8), sigma=0.5, pad=8).fit([bars])
    img = pim.transform([bars])[0].reshape(pim.shape_)
    x, p = bars[:, 0], np.abs(bars[:, 0] - bars[:, 1])
    w = np.minimum(p / pim.weight_max_, 1)
    s = pim.sigma_

    def density(yy, xx):
        return np.sum(w * np.exp(-((xx - x) ** 2 + (yy - p) ** 2) / (2 * s * s))) / (2 * np.pi * s * s)

    xe, ye = pim.x_edges_, pim.y_edges_
    ref, _ = dblquad(density, xe[4], xe[5], ye[3], ye[4])
    assert img[3, 4] == pytest.approx(ref, rel=1e-7)
    # The persistence axis starts at 0: mass below it is cut off (half of each
    # Gaussian's tail below zero); everything else is inside the padded grid.
    from scipy.special import ndtr
    expected = np.sum(w * (1 - ndtr(-p / s)))
    assert img.sum() == pytest.approx(expected, rel=1e-9)


# --------------------------------------------------------------- Strahler
@pytest.mark.parametrize("depth", [1, 2, 3, 5])
def test_perfect_binary_tree_strahler(depth):
    """Perfect binary tree with 2**depth tips plus a stem: root branch order
    depth + 1 and bifurcation ratio 2 (methods dossier oracle 17, derived by
    hand from Strahler's rules)."""
    parent, coords = [-1, 0], [[0.0, 0.0], [1.0, 0.0]]
    level = [1]
    for d in range(depth):
        new = []
        for v in level:
            for s in (-1, 1):
                parent.append(v)
                coords.append([coords[v][0] + 1, coords[v][1] + s * 2.0 ** -d])
                new.append(len(parent) - 1)
        level = new
    t = Tree.from_parents(parent, coords)
    br = strahler_order(t)
    root_branch = br["start"] == t.root
    assert br["order"][root_branch].tolist() == [depth + 1]
    ratio, counts = bifurcation_ratio(t)
    assert counts == {i + 1: 2 ** (depth - i) for i in range(depth + 1)}
    assert ratio == pytest.approx(2.0)


# ------------------------------------------------------------ spanning trees
def _graph(nxg, seed=0):
    rng = np.random.default_rng(seed)
    nodes = {v: i for i, v in enumerate(nxg.nodes)}
    pos = rng.normal(size=(len(nodes), 3)) * 10
    edges = [(nodes[a], nodes[b]) for a, b in nxg.edges()]
    return SkeletonGraph.from_edges(pos, edges)


def _tree_key(g, pe):
    return tuple(sorted(pe[pe >= 0].tolist()))


@pytest.mark.parametrize("nxg, draws", [(nx.complete_graph(4), 1600), (nx.grid_2d_graph(3, 3), 9600)])
def test_wilson_sampler_is_uniform(nxg, draws):
    """Uniform over all spanning trees: K4 has 16 (Cayley's formula n^(n-2)),
    the 3x3 grid 192 (matrix-tree theorem, networkx.number_of_spanning_trees);
    a chi-square test over the draws does not reject at p = 0.001."""
    g = _graph(nxg)
    n_trees = round(nx.number_of_spanning_trees(nxg))
    assert n_trees == {4: 16, 9: 192}[nxg.number_of_nodes()]
    nodes = np.arange(g.n_nodes)
    counts = {}
    for seed in range(draws):
        _, pe = _tree_edges(g, 0, nodes, "random", seed)
        key = _tree_key(g, pe)
        counts[key] = counts.get(key, 0) + 1
    assert len(counts) == n_trees
    assert stats.chisquare(list(counts.values())).pvalue > 1e-3


def test_spanning_tree_count_matches_networkx():
    """log tau by sparse LU vs networkx.number_of_spanning_trees; cube = 384
    (methods dossier 6.1, oracle 5)."""
    for nxg in (nx.hypercube_graph(3), nx.petersen_graph(), nx.grid_2d_graph(4, 5)):
        g = _graph(nxg)
        assert count_spanning_trees(g, log=False) == pytest.approx(nx.number_of_spanning_trees(nxg),
                                                                   rel=1e-9)
    assert round(count_spanning_trees(_graph(nx.hypercube_graph(3)), log=False)) == 384


def test_spanning_tree_count_with_hanging_trees_and_parallel_edges():
    """Leaves are peeled before the determinant; the count still equals
    networkx.number_of_spanning_trees on a multigraph (parallel edges count
    apart) with trees hanging off its cycles and a separate tree component."""
    rng = np.random.default_rng(4)
    nxg = nx.MultiGraph(nx.grid_2d_graph(3, 4))
    nxg.add_edge((0, 0), (0, 1))  # a parallel edge
    nodes = list(nxg.nodes)
    for i in range(8):  # hanging trees, some two levels deep
        parent = nodes[rng.integers(len(nodes))]
        nxg.add_edge(parent, ("leaf", i))
        nodes.append(("leaf", i))
    nxg.add_edges_from([("t", 0), ("t", 1), ("t", 2)])  # a tree component
    g = _graph(nxg)
    ref = np.prod([nx.number_of_spanning_trees(nxg.subgraph(c))
                   for c in nx.connected_components(nxg)])
    assert count_spanning_trees(g, log=False) == pytest.approx(ref, rel=1e-9)
    assert np.isnan(count_spanning_trees(g, max_nodes=5))


@pytest.mark.parametrize("name", ["lattice", "torus", "ring2d", "venation", "frame"])
@pytest.mark.parametrize("method", ["shortest", "minimum", "widest", "random"])
def test_spanning_trees_on_cyclic_phantoms(name, method):
    """Every tree covers all nodes of the component, keeps total length in
    cut mode, and has exactly 2 x cycle rank more tips than the graph (each
    cut makes two); drop mode removes exactly the cut length."""
    ph = sm.phantoms.make(name)
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    root = choose_root(g)
    lab = g.component_labels()
    comp = lab == lab[root]
    in_comp_edges = comp[g.edges[:, 0]]
    rank = int(in_comp_edges.sum() - comp.sum() + 1)
    assert rank == g.cycle_rank if g.n_components == 1 else rank >= 1
    tips = int((g.node_degree[comp] == 1).sum()) - int(g.node_degree[root] == 1)
    for t in spanning_trees(g, root, method=method, n=2, seed=3):
        assert t.meta["component_nodes"] == comp.sum()
        assert t.total_length == pytest.approx(g.edge_length[in_comp_edges].sum(), rel=1e-9)
        assert len(t.tips) == tips + 2 * rank
        assert t.meta["n_cut"] == rank
        # The component's nodes are the first points, at their graph positions.
        np.testing.assert_allclose(t.coords[:comp.sum()], g.nodes[comp])
    dropped = spanning_trees(g, root, method=method, cut="drop")[0]
    assert dropped.meta["n_dropped"] == rank == len(dropped.meta["left_out_edges"])
    cut_length = g.edge_length[dropped.meta["left_out_edges"]].sum()
    assert dropped.total_length == pytest.approx(g.edge_length[in_comp_edges].sum() - cut_length)


def test_shortest_tree_keeps_network_distance():
    """The shortest-path tree keeps every node's distance along the network
    (networkx Dijkstra as the reference), and each cut sits
    where both sides are equally far."""
    ph = sm.phantoms.make("lattice")
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    root = choose_root(g, "center")
    t = spanning_trees(g, root)[0]
    w = nx.Graph()
    for (a, b), L in zip(g.edges, g.edge_length):
        if a != b and (not w.has_edge(a, b) or w[a][b]["weight"] > L):
            w.add_edge(int(a), int(b), weight=float(L))
    ref = nx.single_source_dijkstra_path_length(w, int(root))
    d = t.path_distance[: g.n_nodes]
    np.testing.assert_allclose(d, [ref[i] for i in range(g.n_nodes)], rtol=1e-9)
    # The last 2k points are the k cut ends on one side, then on the other.
    k = t.meta["n_cut"]
    assert k == g.cycle_rank
    np.testing.assert_allclose(t.path_distance[-2 * k:-k], t.path_distance[-k:], rtol=1e-9)


# ----------------------------------------------------------------- roots
@given(st.integers(0, 2**31 - 1))
def test_center_root_is_least_eccentric(seed):
    """Weighted graph centre against networkx.eccentricity on all-pairs
    Dijkstra lengths (general-purpose reference)."""
    rng = np.random.default_rng(seed)
    nxg = nx.connected_watts_strogatz_graph(int(rng.integers(5, 30)), 4, 0.3, seed=int(seed % 1000))
    g = _graph(nxg, seed)
    w = nx.Graph()
    for (a, b), L in zip(g.edges, g.edge_length):
        w.add_edge(int(a), int(b), weight=float(L))
    sp = dict(nx.all_pairs_dijkstra_path_length(w))
    ecc = nx.eccentricity(w, sp=sp)
    r = choose_root(g, "center")
    assert ecc[r] == pytest.approx(min(ecc.values()), rel=1e-12)


def test_root_rules_on_phantoms():
    ph = sm.phantoms.make("y")
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    thick = choose_root(g, "thickest")
    assert g.node_radius[thick] == g.node_radius.max()
    # The Y's stem is the thickest branch: its free end is among the top two radii.
    p = g.nodes[thick] + 1.0
    assert choose_root(g, "point", point=p) == thick
    # 'face': the tip nearest the low z face.
    f = choose_root(g, "face", face="z-")
    tips = np.flatnonzero(g.node_degree == 1)
    assert f in tips and g.nodes[f, 0] == g.nodes[tips, 0].min()
    two = sm.phantoms.make("tree")
    g2 = sm.skeleton_graph(two.mask, two.spacing)
    roots = choose_root(g2, components="all")
    assert len(roots) == g2.n_components


@pytest.mark.parametrize("bad, match", [
    (dict(parent=[-1, -1, 0], coords=np.zeros((3, 2))), "exactly one root"),
    (dict(parent=[-1, 2, 1], coords=np.zeros((3, 2))), "cycle"),
    (dict(parent=[-1, 5], coords=np.zeros((2, 2))), "out of range"),
    (dict(parent=[-1, 0], coords=[[0, 0], [np.nan, 1]]), "NaN"),
    (dict(parent=[-1, 0], coords=np.zeros((3, 2))), "rows"),
    (dict(parent=[], coords=np.zeros((0, 2))), "non-empty"),
])
def test_tree_input_errors(bad, match):
    with pytest.raises(InputError, match=match):
        Tree.from_parents(**bad)


def test_rooting_errors():
    ph = sm.phantoms.make("torus")
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    with pytest.raises(InputError, match="unknown root method"):
        choose_root(g, "tallest")
    with pytest.raises(InputError, match="face must look like"):
        choose_root(g, "face", face="top")
    with pytest.raises(InputError, match="needs point"):
        choose_root(g, "point")
    with pytest.raises(InputError, match="unknown tree method"):
        spanning_trees(g, method="best")
    with pytest.raises(InputError, match="not a node index"):
        spanning_trees(g, root=99)
    t = spanning_trees(g)[0]
    with pytest.raises(InputError, match="unknown filtration"):
        barcode(t, "height")
    with pytest.raises(InputError, match="needs axis"):
        barcode(t, "axis")
    with pytest.raises(InputError, match="values but the tree"):
        barcode(t, np.zeros(3))
    with pytest.raises(InputError, match="not fitted"):
        sm.PersistenceImager().transform([np.zeros((1, 2))])
    with pytest.raises(InputError, match="NaN"):
        bottleneck_distance([[np.nan, 1]], [[0, 1]])
