"""Radial (Sholl-type) profiles: a brute-force reference, analytic cases, phantoms."""

import networkx as nx
import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

import skelmorph as sm
from skelmorph import SkeletonGraph, Tree, profile_distance, profile_summary, radial_profiles
from skelmorph.descriptors.radial import PROFILE_COLUMNS, _from_graph, _from_tree
from skelmorph.errors import InputError


# ------------------------------------------------------------ brute force
def brute_force(pts, seg, rad, deg, root, r, weights=None):
    """Every column at one radius, by clipping every segment to the ball and
    taking the component of the centre explicitly (networkx), independently
    of the one-sweep code."""
    c = pts[root]
    g = nx.MultiGraph()
    g.add_node(("p", root), pos=c)
    crossings = 0
    cut_info = {}
    for s, (a, b) in enumerate(seg):
        p, q = pts[a], pts[b]
        dvec = q - p
        w = p - c
        A, B, C = dvec @ dvec, w @ dvec, w @ w - r * r
        disc = B * B - A * C
        if A == 0 or disc <= 0:
            continue
        t1, t2 = (-B - np.sqrt(disc)) / A, (-B + np.sqrt(disc)) / A
        crossings += int(0 <= t1 <= 1) + int(0 <= t2 <= 1)
        lo, hi = max(t1, 0.0), min(t2, 1.0)
        if lo >= hi:
            continue
        na = ("p", a) if lo == 0 else ("c", s, 0)
        nb = ("p", b) if hi == 1 else ("c", s, 1)
        for node, t in ((na, lo), (nb, hi)):
            g.add_node(node, pos=p + t * dvec)
            if node[0] == "c":
                inward = dvec if t == hi else -dvec
                cut_info[node] = (inward, rad[a] + t * (rad[b] - rad[a]))
        mid = 0.5 * (p + q)
        key = (max(np.linalg.norm(p - c), np.linalg.norm(q - c)),
               min(np.linalg.norm(p - c), np.linalg.norm(q - c)), *mid)
        g.add_edge(na, nb, length=(hi - lo) * np.sqrt(A), order_key=key)
    h = g.subgraph(nx.node_connected_component(g, ("p", root))).copy()
    pos = nx.get_node_attributes(h, "pos")
    cuts = [v for v in h if v[0] == "c"]
    bps = [v for v in h if v[0] == "p" and (h.degree(v) >= 3 or (v[1] == root and h.degree(v) >= 2))]
    tips = [v for v in h if v[0] == "p" and deg[v[1]] == 1 and v[1] != root]
    out = {"crossings": crossings, "cut_ends": len(cuts),
           "total_length": sum(d["length"] for *_, d in h.edges(data=True)),
           "branch_points": len(bps), "tips": len(tips),
           "branching_pattern": len(bps) - len(tips),
           "loops": h.number_of_edges() - h.number_of_nodes() + 1}
    # Leaf index on the minimum spanning tree of the weights (max d, min d, midpoint).
    keys = sorted((d["order_key"], u, v, k) for u, v, k, d in h.edges(keys=True, data=True))
    for rank, (_, u, v, k) in enumerate(keys):
        h.edges[u, v, k]["rank"] = rank
    t = nx.minimum_spanning_tree(h, weight="rank")
    leaves = set(cuts) | set(tips)
    tree = nx.bfs_tree(t, ("p", root))
    crit = set(bps) | leaves | {("p", root)}
    counts = [sum(1 for x in nx.descendants(tree, q) | {q} if x in leaves) for q in crit]
    out["leaf_index"] = np.mean(counts)
    # Tortuosity: chains between critical points (degree other than 2, the root, cuts).
    crit_all = crit | {v for v in h if h.degree(v) != 2}
    seen, ratios = set(), []
    for q in crit_all:
        for _, nb, key in h.edges(q, keys=True):
            eid = (frozenset((q, nb)), key)
            if eid in seen:
                continue
            seen.add(eid)
            length, prev_edge, cur = h.edges[q, nb, key]["length"], eid, nb
            while cur not in crit_all:
                (_, nxt, k2), = [(a, b, k) for a, b, k in h.edges(cur, keys=True)
                                 if (frozenset((a, b)), k) != prev_edge]
                prev_edge = (frozenset((cur, nxt)), k2)
                seen.add(prev_edge)
                length += h.edges[cur, nxt, k2]["length"]
                cur = nxt
            chord = np.linalg.norm(pos[cur] - pos[q])
            if chord > 1e-12:
                ratios.append(length / chord)
    out["tortuosity"] = np.mean(ratios) if ratios else np.nan
    units = [(cut_info[v][0] / np.linalg.norm(cut_info[v][0]), (pos[v] - c) / r) for v in cuts]
    out["flux_cosine"] = np.mean([a @ b for a, b in units]) if cuts else np.nan
    # Angle between unit vectors a, b: 2 atan2(|a - b|, |a + b|) (Kahan), exact near 0.
    out["flux_angle"] = (np.mean([2 * np.arctan2(np.linalg.norm(a - b), np.linalg.norm(a + b))
                                  for a, b in units]) if cuts else np.nan)
    out["taper"] = np.mean([cut_info[v][1] for v in cuts]) if cuts else np.nan
    field = np.zeros(len(c))
    for v in bps:
        x = pos[v]
        if np.linalg.norm(c - x) > 1e-12:
            q = 1.0 if weights is None else weights[v[1]]
            field += q * (c - x) / np.linalg.norm(c - x) ** 3
    out["field"] = np.linalg.norm(field)
    return out


def assert_matches(profile, structure, radii, weights=None):
    for i, r in enumerate(radii):
        ref = brute_force(structure.pts, structure.seg, structure.rad, structure.deg,
                          structure.root, r, weights)
        row = profile.iloc[i]
        assert row["radius"] == r
        for key, value in ref.items():
            assert row[key] == pytest.approx(value, abs=1e-9, rel=1e-9, nan_ok=True), (key, r)


@st.composite
def random_trees(draw):
    n = draw(st.integers(2, 40))
    ndim = draw(st.sampled_from([2, 3]))
    rng = np.random.default_rng(draw(st.integers(0, 2**31 - 1)))
    parent = np.array([-1] + [int(rng.integers(0, i)) for i in range(1, n)])
    coords = np.zeros((n, ndim))
    for i in range(1, n):
        coords[i] = coords[parent[i]] + rng.normal(size=ndim) * 3
    perm = rng.permutation(n)
    inv = np.argsort(perm)
    new_parent = np.where(parent[perm] >= 0, inv[np.maximum(parent[perm], 0)], -1)
    return Tree.from_parents(new_parent, coords[perm], rng.uniform(0.5, 2, n)), rng


@st.composite
def random_graphs(draw):
    """Random connected multigraphs with loops, parallel branches and bent polylines."""
    n = draw(st.integers(2, 14))
    ndim = draw(st.sampled_from([2, 3]))
    rng = np.random.default_rng(draw(st.integers(0, 2**31 - 1)))
    nodes = rng.normal(size=(n, ndim)) * 10
    edges = [(int(rng.integers(0, i)), i) for i in range(1, n)]
    edges += [tuple(int(x) for x in rng.integers(0, n, 2)) for _ in range(draw(st.integers(0, 6)))]
    polylines = []
    for a, b in edges:
        k = int(rng.integers(0, 4))
        inner = (nodes[a] + (nodes[b] - nodes[a]) * np.linspace(0, 1, k + 2)[1:-1, None]
                 + rng.normal(size=(k, ndim)) * 2)
        if a == b and k < 2:
            inner = nodes[a] + rng.normal(size=(2, ndim)) * 3
        polylines.append(np.vstack([nodes[a], inner, nodes[b]]))
    g = SkeletonGraph.from_edges(nodes, edges, node_radius=rng.uniform(0.5, 2, n),
                                 polylines=polylines)
    return g, int(rng.integers(0, n)), rng


# ---------------------------------------------------------- reference checks
@given(random_trees())
def test_trees_match_brute_force(case):
    tree, rng = case
    radii = rng.uniform(0, 1.1 * tree.radial_distance.max(), 6)
    w = rng.uniform(0, 3, tree.n_points)
    prof = radial_profiles(tree, radii=radii, weights=w)
    assert_matches(prof, _from_tree(tree), radii, weights=w)
    assert np.all(prof["loops"] == 0)


@given(random_graphs())
def test_graphs_with_loops_match_brute_force(case):
    g, root, rng = case
    s = _from_graph(g, root)
    d = np.linalg.norm(s.pts - s.pts[root], axis=1)
    radii = rng.uniform(0, 1.1 * d.max(), 6)
    prof = radial_profiles(g, root=root, radii=radii)
    assert_matches(prof, s, radii)


# ------------------------------------------------------------------ analytic
def test_star_of_rays():
    """k straight rays of length 20 from c: crossings = cut_ends = k and
    total_length = k r below the ray length (analytic)."""
    k, length = 7, 20.0
    ang = 2 * np.pi * np.arange(k) / k
    tips = length * np.column_stack([np.cos(ang), np.sin(ang), np.zeros(k)])
    g = SkeletonGraph.from_edges(np.vstack([[0, 0, 0], tips]), [(0, i + 1) for i in range(k)])
    radii = np.array([0.5, 3.0, 11.0, 19.5])
    prof = radial_profiles(g, root=0, radii=radii)
    np.testing.assert_allclose(prof["crossings"], k)
    np.testing.assert_allclose(prof["cut_ends"], k)
    np.testing.assert_allclose(prof["total_length"], k * radii)
    np.testing.assert_allclose(prof["flux_cosine"], 1.0)
    np.testing.assert_allclose(prof["leaf_index"], (k + k) / (k + 1))  # c sees k, each cut end 1


def test_wheel_loops_jump_at_rim():
    """Spokes of length R plus the rim polygon: loops 0 for r < R and k for r > R (analytic)."""
    k, R = 6, 10.0
    ang = 2 * np.pi * np.arange(k) / k
    rim = R * np.column_stack([np.cos(ang), np.sin(ang)])
    edges = [(0, i + 1) for i in range(k)] + [(i + 1, (i + 1) % k + 1) for i in range(k)]
    g = SkeletonGraph.from_edges(np.vstack([[0, 0], rim]), edges)
    prof = radial_profiles(g, root=0, radii=[5.0, 9.99, 10.01, 30.0])
    assert prof["loops"].tolist() == [0, 0, k, k]
    assert prof["branch_points"].tolist() == [1, 1, k + 1, k + 1]


@given(st.floats(0.5, 10), st.floats(0.01, 0.99))
def test_flux_angle_of_an_offset_line(dist, frac):
    """A straight branch on a line passing at distance d from c, leaving
    from its closest point: at radius r the angle between the branch and
    the outward normal is arcsin(d / r) (plane geometry)."""
    far = 50.0
    nodes = np.array([[0.0, 0.0], [dist, 0.0], [dist, far]])
    g = SkeletonGraph.from_edges(nodes, [(0, 1), (1, 2)])
    r = dist + frac * (np.hypot(dist, far) - dist)
    prof = radial_profiles(g, root=0, radii=[r])
    assert prof["flux_angle"][0] == pytest.approx(np.arcsin(dist / r), abs=1e-12)
    assert prof["flux_cosine"][0] == pytest.approx(np.sqrt(1 - (dist / r) ** 2), abs=1e-12)


def test_square_grid_crossings():
    """Square grid of spacing 1 centred at a node: N(r) = 4 (2 floor(r) + 1)
    for generic r (methods dossier 5.9, oracle 21: r = 0.5, 1.5, 2.5, 3.7 ->
    4, 12, 20, 28)."""
    m = 21
    ij = np.array([(i, j) for i in range(m) for j in range(m)], float) - m // 2
    idx = {tuple(p): k for k, p in enumerate(ij)}
    edges = [(idx[tuple(p)], idx[tuple(p + d)]) for p in ij for d in ((0, 1), (1, 0))
             if tuple(p + d) in idx]
    g = SkeletonGraph.from_edges(ij, edges)
    prof = radial_profiles(g, root=idx[(0.0, 0.0)], radii=[0.5, 1.5, 2.5, 3.7])
    assert prof["crossings"].tolist() == [4, 12, 20, 28]


@pytest.mark.parametrize("name", ["torus", "venation", "lattice", "y"])
def test_phantom_crossings_equal_direct_count(name):
    """Crossings on phantoms equal a direct count of sphere-polyline
    intersections over every segment of every polyline (independent loop)."""
    ph = sm.phantoms.make(name)
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    root = sm.choose_root(g, "centroid")
    c = g.nodes[root]
    rng = np.random.default_rng(1)
    dmax = np.linalg.norm(g.points - c, axis=1).max()
    radii = rng.uniform(0.1, dmax, 8)
    prof = radial_profiles(g, root=root, radii=radii)
    for i, r in enumerate(radii):
        count = 0
        for e in range(g.n_edges):
            p = g.edge_points(e)
            dist = np.linalg.norm(p - c, axis=1) - r
            count += int(np.sum(np.sign(dist[:-1]) != np.sign(dist[1:])))
            # A segment dipping inside and out again between its ends crosses twice.
            for a, b in zip(p[:-1], p[1:]):
                dv, w = b - a, a - c
                A, B, C = dv @ dv, w @ dv, w @ w - r * r
                if A > 0 and B * B - A * C > 0:
                    t1, t2 = (-B - np.sqrt(B * B - A * C)) / A, (-B + np.sqrt(B * B - A * C)) / A
                    if 0 < t1 < 1 and 0 < t2 < 1:
                        count += 2
        assert prof["crossings"][i] == count


def test_root_at_tip_or_junction_anisotropic_same_physical_answer():
    """The Y phantom at spacing (2, 1, 1) and (1, 1, 1): profiles in physical
    units agree (crossings exactly at generic radii, length within 3 %), with
    the root at the stem tip and at the junction, 3D; and a 2D ring."""
    iso = sm.phantoms.make("y")
    ani = sm.phantoms.make("y", spacing=(2.0, 1.0, 1.0))
    gi = sm.skeleton_graph(iso.mask, iso.spacing)
    ga = sm.skeleton_graph(ani.mask, ani.spacing)
    for rule in ("thickest", "center"):
        ri, ra = sm.choose_root(gi, rule), sm.choose_root(ga, rule)
        np.testing.assert_allclose(gi.nodes[ri], ga.nodes[ra], atol=2.5)
        radii = np.array([7.3, 15.1, 23.7])
        pi = radial_profiles(gi, root=ri, radii=radii)
        pa = radial_profiles(ga, root=ra, radii=radii)
        assert pi["crossings"].tolist() == pa["crossings"].tolist()
        np.testing.assert_allclose(pi["total_length"], pa["total_length"], rtol=0.03)
    ring = sm.phantoms.make("ring2d")
    gr = sm.skeleton_graph(ring.mask, ring.spacing)
    # A circle with the centre on it: N(r) = 2 for 0 < r < 2R (methods dossier 5.9).
    prof = radial_profiles(gr, root=0, radii=[5.0, 30.0, 70.0])
    assert prof["crossings"].tolist() == [2, 2, 2]


# --------------------------------------------------------- API and summaries
def test_order_of_radii_and_columns():
    g = SkeletonGraph.from_edges([[0, 0], [3, 4], [6, 0]], [(0, 1), (1, 2)])
    radii = [4.0, 1.0, 5.5]
    prof = radial_profiles(g, root=0, radii=radii)
    assert isinstance(prof, pd.DataFrame)
    assert list(prof.columns) == list(PROFILE_COLUMNS)
    assert prof["radius"].tolist() == radii
    # At r = 5.5 the second branch, (3, 4) + t (3, -4), is cut where
    # 25 t^2 - 14 t + 25 = 5.5^2 (plane geometry).
    t = (14 + np.sqrt(14**2 + 4 * 25 * (5.5**2 - 25))) / 50
    np.testing.assert_allclose(prof["total_length"], [4.0, 1.0, 5 + 5 * t])
    default = radial_profiles(g, root=0, n_radii=50)
    assert len(default) == 50 and default["radius"].iloc[-1] == pytest.approx(6.0)


def test_summary_and_distance():
    """Sholl decay: for crossings proportional to r^2 exp(-k r) in 3D,
    log(N / 4 pi r^2) is linear with slope -k (Sholl 1953's semi-log method)."""
    r = np.linspace(1, 50, 60)
    n = 1000 * r**2 * np.exp(-0.07 * r)
    prof = pd.DataFrame({"radius": r, "crossings": n})
    prof.attrs["ndim"] = 3
    summary = profile_summary(prof)
    assert summary["sholl_regression_coefficient"] == pytest.approx(0.07, rel=1e-9)
    assert summary["radius_of_max_crossings"] == pytest.approx(r[np.argmax(n)])
    # L1 distance between y = r and y = r + 1 on [0, 10]: 10 (analytic).
    a = pd.DataFrame({"radius": np.linspace(0, 10, 11), "total_length": np.linspace(0, 10, 11)})
    b = a.assign(total_length=a["total_length"] + 1)
    assert profile_distance(a, b, "total_length") == pytest.approx(10.0)
    assert profile_distance(a, b, "total_length", p=2) == pytest.approx(np.sqrt(10.0))
    assert profile_distance(a, a, "total_length", normalise=True) == 0.0


def test_profile_errors():
    g = SkeletonGraph.from_edges([[0, 0], [3, 4]], [(0, 1)])
    with pytest.raises(InputError, match="radii"):
        radial_profiles(g, root=0, radii=[np.nan])
    with pytest.raises(InputError, match="not a node index"):
        radial_profiles(g, root=5)
    with pytest.raises(InputError, match="Tree or a SkeletonGraph"):
        radial_profiles(np.zeros((3, 3)))
    t = Tree.from_parents([-1, 0], [[0, 0], [1, 1]])
    with pytest.raises(InputError, match="own root"):
        radial_profiles(t, root=0)
    with pytest.raises(InputError, match="weights"):
        radial_profiles(t, weights=[1.0])
    with pytest.raises(InputError, match="unknown profile column"):
        profile_distance(radial_profiles(t), radial_profiles(t), "height")
