"""Path counts and path-poset invariants."""

import itertools

import networkx as nx
import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

import skelmorph as sm
from skelmorph import path_counts, path_poset_invariants
from skelmorph.errors import InputError

gudhi = pytest.importorskip("gudhi")


# ------------------------------------------------------------ hand-derived
def test_triangle():
    """Triangle: n = (3, 3, 3, 0) (each vertex is the middle of one 2-path; a
    3-path needs four vertices).  k = 2, m = 0: elements 3 + 3 + 3 = 9;
    comparable pairs: vertex < edge 6, vertex < 2-path 9, edge < 2-path 6 ->
    21; chains vertex < edge < 2-path: each 2-path has 2 edges of 2 vertices
    -> 4 each, 12.  f = (9, 21, 12), chi = 0; the complex is a circle:
    b = (1, 1)."""
    g = nx.cycle_graph(3)
    assert path_counts(g, 3).tolist() == [3, 3, 3, 0]
    inv = path_poset_invariants(g, 2)
    assert inv["f_vector"] == [9, 21, 12]
    assert inv["betti"] == (1, 1)


def test_star():
    """K_{1,3}: n = (4, 3, 3, 0); m = 0, k = 2: f = (10, 3*2 + 3*5, 3*4) =
    (10, 21, 12), chi = 1, a tree: b = (1, 0).  m = 1: edges and 2-paths form
    the line graph, a triangle: f = (6, 6), b = (1, 1)."""
    g = nx.star_graph(3)
    assert path_counts(g, 3).tolist() == [4, 3, 3, 0]
    inv = path_poset_invariants(g, 2)
    assert inv["f_vector"] == [10, 21, 12] and inv["betti"] == (1, 0)
    inv1 = path_poset_invariants(g, 2, min_edges=1)
    assert inv1["f_vector"] == [6, 6] and inv1["betti"] == (1, 1)


def test_four_cycle():
    """C4: n = (4, 4, 4, 4, 0) (every edge is the middle of one 3-path).
    Chains ending at a path with 3 edges: g(3, .) = (1, 9, 16, 8) (sub-paths
    by length: 2 of length 2, 3 of length 1, 4 vertices), with g(2, .) = (1,
    5, 4), g(1, .) = (1, 2).  f = (16, 8 + 20 + 36, 16 + 64, 32) = (16, 64, 80,
    32), chi = 0, b = (1, 1)."""
    g = nx.cycle_graph(4)
    assert path_counts(g, 4).tolist() == [4, 4, 4, 4, 0]
    inv = path_poset_invariants(g, 3)
    assert inv["f_vector"] == [16, 64, 80, 32]
    assert inv["betti"] == (1, 1) and inv["euler_characteristic"] == 0


def test_k4():
    """K4: n = (4, 6, 12, 12, 0): 4 vertices x C(3, 2) 2-paths; 3-paths are
    the 4!/2 = 12 Hamiltonian paths.  b = (1, E - V + 1) = (1, 3) from
    vertices up; from edges up the line graph of K4 is the octahedron (6
    vertices, 12 edges): b = (1, 7)."""
    g = nx.complete_graph(4)
    assert path_counts(g, 4).tolist() == [4, 6, 12, 12, 0]
    assert path_poset_invariants(g, 3)["betti"] == (1, 3)
    assert path_poset_invariants(g, 3, min_edges=1)["betti"] == (1, 7)


# ----------------------------------------------------- reference: networkx
def nx_counts(g, k):
    """Simple paths by networkx.all_simple_edge_paths over unordered end pairs."""
    out = [g.number_of_nodes()] + [0] * k
    nodes = list(g.nodes)
    for a, b in itertools.combinations(nodes, 2):
        for p in nx.all_simple_edge_paths(g, a, b, cutoff=k):
            out[len(p)] += 1
    return out


@st.composite
def multigraphs(draw, max_nodes=7, max_edges=10):
    n = draw(st.integers(1, max_nodes))
    pairs = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)),
                          max_size=max_edges))
    g = nx.MultiGraph()
    g.add_nodes_from(range(n))
    g.add_edges_from(pairs)
    return g


@given(multigraphs(), st.integers(0, 6))
def test_counts_match_networkx(g, k):
    """Closed forms (j <= 3) and enumeration (j >= 4) against networkx's
    simple-path enumeration, on multigraphs with parallel edges and self-loops."""
    assert path_counts(g, k).tolist() == nx_counts(g, k)


# -------------------------------------------------- reference: gudhi homology
def brute_force_complex(g, k, m):
    """Order complex of P_{m..k} built explicitly: every chain inserted into a
    gudhi SimplexTree; f-vector by counting, Betti numbers over Z/2."""
    paths = []
    if m == 0:
        paths += [((v,), ()) for v in g.nodes]
    for a, b in itertools.combinations(list(g.nodes), 2):
        for p in nx.all_simple_edge_paths(g, a, b, cutoff=k):
            if len(p) >= max(m, 1):
                verts = (p[0][0],) + tuple(e[1] for e in p)
                paths.append((verts, tuple(e[2] if len(e) > 2 else 0 for e in p)))

    def canon(verts, keys):
        rv, rk = verts[::-1], keys[::-1]
        return min((verts, keys), (rv, rk))

    elements = {canon(*p): i for i, p in enumerate(paths)}
    elements = {p: i for i, p in enumerate(elements)}
    below = {i: [] for i in elements.values()}
    for (verts, keys), i in elements.items():
        j = len(keys)
        for a0 in range(j + 1):
            for b0 in range(a0 + m, j + 1):
                if (a0, b0) == (0, j):
                    continue
                sub = canon(verts[a0:b0 + 1], keys[a0:b0])
                below[i].append(elements[sub])
    st_ = gudhi.SimplexTree()

    def extend(chain):
        low = below[chain[0]]
        if not low:
            st_.insert(chain)
        for x in low:
            extend([x] + chain)

    for i in elements.values():
        extend([i])
    f = [0] * (st_.dimension() + 1)
    for simplex, _ in st_.get_simplices():
        f[len(simplex) - 1] += 1
    st_.compute_persistence(homology_coeff_field=2, persistence_dim_max=True)
    betti = st_.betti_numbers() + [0, 0]
    return f, betti


@given(multigraphs(max_nodes=6, max_edges=8), st.integers(0, 4), st.sampled_from([0, 1]))
def test_invariants_match_brute_force_homology(g, k, m):
    if k < m or (m == 1 and g.number_of_edges() == sum(1 for a, b in g.edges() if a == b)):
        return  # the poset would be empty
    inv = path_poset_invariants(g, k, min_edges=m)
    f, betti = brute_force_complex(g, k, m)
    assert inv["f_vector"] == f
    assert list(inv["betti"]) == betti[:2] and all(b == 0 for b in betti[2:])


# ----------------------------------------------------------- skeleton graphs
def test_skeleton_graph_input_and_cycle_rank():
    """From vertices up the Betti numbers are the graph's (components, cycle
    rank) once self-loops are set aside: a closed ring (one node, one
    self-loop) has no simple path of length >= 1."""
    ph = sm.phantoms.make("frame")
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    inv = path_poset_invariants(g, 4)
    assert inv["betti"] == (g.n_components, g.cycle_rank)
    assert inv["counts"].tolist() == nx_counts(g.to_networkx(), 4)
    torus = sm.phantoms.make("torus")
    gt = sm.skeleton_graph(torus.mask, torus.spacing)
    assert path_poset_invariants(gt, 3)["betti"] == (1, 0)
    assert path_counts(gt, 3).tolist() == [1, 0, 0, 0]


def test_errors():
    with pytest.raises(InputError, match="k must be"):
        path_counts(nx.path_graph(3), -1)
    with pytest.raises(InputError, match="min_edges"):
        path_poset_invariants(nx.path_graph(3), 2, min_edges=2)
    with pytest.raises(InputError, match="empty"):
        path_poset_invariants(nx.path_graph(3), 0, min_edges=1)
    with pytest.raises(InputError, match="SkeletonGraph or a networkx"):
        path_counts(np.zeros((3, 2)), 2)


def test_cli_paths(tmp_path):
    """--paths 3 writes paths.json; from vertices up the Betti numbers are
    (components, cycle rank) of the frame graph (5 loops)."""
    import json

    from skelmorph.cli import main
    assert main(["phantom", "frame", "--out", str(tmp_path / "f.tif")]) == 0
    assert main(["analyze", str(tmp_path / "f.tif"), "--out", str(tmp_path / "r"), "--quiet",
                 "--paths", "3", "--n-radii", "0", "--tree", "none"]) == 0
    data = json.loads((tmp_path / "r" / "paths.json").read_text())
    assert data["counts"][:2] == [8, 12]
    assert data["from_vertices"]["betti"] == [1, 5]
    # Every frame node has degree 3: 2-paths 8 C(3,2) = 24; from edges up the
    # line graph has 12 vertices and 24 edges: b1 = 24 - 12 + 1 = 13.
    assert data["counts"][2] == 24 and data["from_edges"]["betti"] == [1, 13]
