"""Cross-checks against general-purpose libraries and an open image."""

import networkx as nx
import numpy as np
import pytest
from scipy import ndimage as ndi
from skimage.measure import euler_number

import skelmorph as sm
from skelmorph import phantoms as ph
from skelmorph.build import centreline_radius
from skelmorph.skeleton import skeletonize


def cavities(mask):
    """Enclosed background components (6-connected, not touching the edge)."""
    lab, n = ndi.label(~mask)
    edge = np.unique(np.concatenate([np.take(lab, i, axis=a).ravel()
                                     for a in range(mask.ndim) for i in (0, -1)]))
    return n - np.count_nonzero(edge)


@pytest.mark.parametrize("make", [
    lambda: ph.torus(), lambda: ph.wire_frame(n_nodes=2), lambda: ph.wire_frame(n_nodes=3),
    lambda: ph.rod_lattice(n_cells=3), lambda: ph.random_tree(seed=2), lambda: ph.y_bifurcation(),
    lambda: ph.foam(size=48, cell=16, rod_radius=2.0, seed=4),
])
def test_loops_match_networkx_and_euler_number(make):
    p = make()
    g = sm.skeleton_graph(p.mask, p.spacing)
    s = sm.summarize(g)
    # networkx (general-purpose reference): components and cycle rank of the export.
    G = g.to_networkx()
    C = nx.number_connected_components(G)
    assert s["n_components"] == C
    assert s["cycle_rank"] == G.number_of_edges() - G.number_of_nodes() + C
    # scikit-image's Euler number (26-connected foreground): chi = b0 - b1 + b2
    # (Odgaard & Gundersen 1993, Bone 14:173).
    chi = euler_number(p.mask, connectivity=3)
    assert chi == s["n_components"] - s["cycle_rank"] + cavities(p.mask)


def test_2d_loops_match_euler_number():
    p = ph.venation(cells=(3, 4), n_spurs=2, seed=0)
    s = sm.summarize(sm.skeleton_graph(p.mask, p.spacing))
    # 2D, 8-connected foreground: chi = components - holes (scikit-image).
    assert euler_number(p.mask, connectivity=2) == s["n_components"] - s["cycle_rank"]


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (1.5, 1.0, 1.0), (0.7, 1.3, 1.0)])
def test_radius_equals_scipy_distance_transform(spacing):
    # scipy.ndimage.distance_transform_edt (general-purpose reference).
    p = ph.foam(size=40, cell=14, rod_radius=2.5, seed=1)
    coords = np.argwhere(skeletonize(p.mask))
    ref = ndi.distance_transform_edt(p.mask, sampling=spacing)[tuple(coords.T)]
    for method in ("shells", "kdtree"):
        np.testing.assert_allclose(centreline_radius(p.mask, coords, spacing, method=method), ref,
                                   rtol=0, atol=1e-9)
    # A short reach forces the KD-tree fallback for the thicker points.
    np.testing.assert_allclose(centreline_radius(p.mask, coords, spacing, reach=2), ref, atol=1e-9)


def test_tube_radius_close_to_drawn():
    # Drawn radius 5 voxels; voxel-centre distances are within one voxel
    # (methods dossier 2.5: +-0.75 voxel point-wise).
    p = ph.straight_tube(length=60, radius=5, direction=(0, 0, 1))
    g = sm.skeleton_graph(p.mask, p.spacing)
    mean, _, _ = g.edge_radius_stats()
    assert mean[0] == pytest.approx(5.0, abs=0.75)


def test_retina_photograph_end_to_end():
    """scikit-image ships a fundus photograph (skimage.data.retina, a real
    vessel network).  Vessels are dark in the green channel.  Figures recorded
    on 2026-12-01 with scikit-image 0.26 (green channel, background flattened,
    Otsu inside the field of view): 145 junctions, 264 tips, 47 components,
    the largest holding 66 % of 2.2e4 px of centreline.  They come from our
    own run, not from a publication, so the test checks ranges."""
    from skimage import data
    from skimage.filters import gaussian, threshold_otsu

    rgb = data.retina()
    green = rgb[..., 1].astype(float)
    # Flatten uneven illumination so vessels stand out (common practice).
    flat = green - gaussian(green, sigma=25)
    fov = gaussian(green, sigma=3) > 20  # the camera's circular field of view
    flat[~fov] = flat[fov].max()
    result = sm.analyze(flat, threshold=threshold_otsu(flat[fov]), dark=True,
                        min_object_size=100, max_hole_size=30)
    s = result.summary
    assert 100 <= s["n_junctions"] <= 400
    assert s["n_tips"] > s["n_junctions"]
    assert 1.5e4 < s["total_length"] < 4e4
    labels = result.graph.component_labels()
    lengths = np.bincount(labels[result.graph.edges[:, 0]], weights=result.graph.edge_length)
    assert lengths.max() > 0.5 * lengths.sum()  # one connected vessel tree dominates


@pytest.mark.parametrize("seed", [0, 2])
def test_cavity_free_foam_loops_equal_euler_number(seed):
    # scikit-image's euler_number (general-purpose reference).  With cavities
    # filled, chi = components - loops exactly.  These two foams thin to
    # junction clusters that enclose tiny tunnels, which must not be lost.
    p = ph.foam(size=48, cell=14, rod_radius=2.0 + 0.1 * seed, seed=seed)
    mask = sm.to_mask(p.mask, max_hole_size=np.inf)
    assert cavities(mask) == 0
    s = sm.summarize(sm.skeleton_graph(mask, p.spacing))
    assert euler_number(mask, connectivity=3) == s["n_components"] - s["cycle_rank"]


def test_ring_inside_a_junction_cluster_is_kept():
    # Hand-built centreline: a ring of 8 voxels round one background voxel,
    # every ring voxel carrying an outward branch, so the whole ring is one
    # junction cluster.  Counting argument: one loop, 8 tips.
    skel = np.zeros((3, 15, 15), bool)
    ring = [(6, 6), (6, 7), (6, 8), (7, 8), (8, 8), (8, 7), (8, 6), (7, 6)]
    for y, x in ring:
        skel[1, y, x] = True
        dy, dx = np.sign(y - 7), np.sign(x - 7)
        for k in range(1, 6):
            skel[1, y + k * dy, x + k * dx] = True
    assert euler_number(skel, connectivity=3) == 0  # one tunnel (reference)
    g = sm.graph_from_skeleton(skel, skel, prune=False)
    s = sm.summarize(g)
    assert (s["cycle_rank"], s["n_tips"], s["n_components"]) == (1, 8, 1)
