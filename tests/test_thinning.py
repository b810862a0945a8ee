"""Our thinning and the geometry real scans have: thick parts, anisotropic
voxels, thin tubes in any orientation, radii of a few voxels.

Each check names its outside reference: scikit-image's Euler number and
scipy's component labelling (topology), scipy's distance transform, analytic
shapes, Murray (1926), and the tissue label map shipped with pyvista.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import ndimage as ndi
from scipy.spatial.transform import Rotation
from skimage.measure import euler_number

import skelmorph as sm
from skelmorph.measure.vessel import bifurcations
from skelmorph.phantoms import draw_tubes, straight_tube
from skelmorph.thinning import distance_map_sq, is_simple_config, thin

FULL3 = np.ones((3, 3, 3), bool)
FULL2 = np.ones((3, 3), bool)


def _topology(mask):
    """(components, Euler number) with 26/8-connectivity (scipy, scikit-image)."""
    full = FULL3 if mask.ndim == 3 else FULL2
    return ndi.label(mask, full)[1], euler_number(mask, connectivity=mask.ndim)


def _mask_loops(mask):
    """Independent loops of a mask: components + cavities - Euler number."""
    comps, chi = _topology(mask)
    cavities = ndi.label(~np.pad(mask, 1), ndi.generate_binary_structure(mask.ndim, 1))[1] - 1
    return comps + cavities - chi


# ------------------------------------------------------------- simple points

def test_simple_point_test_matches_global_definition():
    # Reference: a voxel is simple iff deleting it changes neither the
    # 26-components, the 6-components of the background nor the Euler number
    # of its neighbourhood (scipy labelling + scikit-image euler_number).
    rng = np.random.default_rng(7)
    s6 = ndi.generate_binary_structure(3, 1)
    for _ in range(3000):
        cube = rng.random((3, 3, 3)) < rng.uniform(0.15, 0.85)
        a = np.zeros((5, 5, 5), bool)
        a[1:4, 1:4, 1:4] = cube
        a[2, 2, 2] = True
        b = a.copy()
        b[2, 2, 2] = False
        ref = (ndi.label(a, FULL3)[1] == ndi.label(b, FULL3)[1]
               and ndi.label(~a, s6)[1] == ndi.label(~b, s6)[1]
               and euler_number(a, 3) == euler_number(b, 3))
        assert is_simple_config(cube) == ref


def test_distance_map_equals_scipy_anisotropic():
    # Reference: scipy.ndimage.distance_transform_edt with sampling.
    rng = np.random.default_rng(1)
    m = ndi.binary_opening(rng.random((30, 40, 35)) < 0.7)
    for sp in [(1.0, 1.0, 1.0), (2.5, 1.0, 0.7), (0.3, 1.7, 1.0)]:
        ours = np.sqrt(distance_map_sq(m, sp))
        ref = ndi.distance_transform_edt(m, sampling=sp)
        assert np.allclose(ours, ref, rtol=1e-6, atol=1e-5)
    m2 = m[5]
    assert np.allclose(np.sqrt(distance_map_sq(m2, (1.5, 1.0))),
                       ndi.distance_transform_edt(m2, sampling=(1.5, 1.0)), rtol=1e-6)


# ------------------------------------------------------------- topology

@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10**6), fill=st.floats(0.3, 0.8), ndim=st.sampled_from([2, 3]),
       aniso=st.sampled_from([(1.0, 1.0, 1.0), (1.5, 1.0, 1.0), (3.0, 1.0, 1.0), (1.0, 2.0, 2.0)]))
def test_thinning_preserves_topology(seed, fill, ndim, aniso):
    # Reference: scikit-image's Euler number and scipy's 26/8-component count
    # of the mask equal those of its thinning, at any voxel size.
    rng = np.random.default_rng(seed)
    shape = (14, 16, 15) if ndim == 3 else (30, 34)
    m = ndi.binary_opening(rng.random(shape) < fill) | (rng.random(shape) < 0.02)
    sp = aniso if ndim == 3 else aniso[1:]
    sk = thin(m, sp)
    assert not (sk & ~m).any()
    assert _topology(sk) == _topology(m)


def test_thinning_is_thin_and_deterministic():
    import numba

    from skelmorph import thinning
    ph = sm.phantoms.foam(size=40.0, cell=12.0, rod_radius=2.0, seed=3)
    a = thin(ph.mask)
    b = thin(ph.mask.copy())
    assert np.array_equal(a, b)
    # The same result on one thread and on all, with every sweep parallel.
    threads, par_min = numba.get_num_threads(), thinning.PARALLEL_MIN
    try:
        thinning.PARALLEL_MIN = 0
        numba.set_num_threads(1)
        one = thin(ph.mask)
        numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
        many = thin(ph.mask)
    finally:
        numba.set_num_threads(threads)
        thinning.PARALLEL_MIN = par_min
    assert np.array_equal(one, a) and np.array_equal(many, a)
    # No 2x2x2 block is full (a one-voxel-wide result).
    blocks = sum(a[i:a.shape[0] - 1 + i, j:a.shape[1] - 1 + j, k:a.shape[2] - 1 + k].astype(int)
                 for i in (0, 1) for j in (0, 1) for k in (0, 1))
    assert blocks.max() < 8


# ------------------------------------------------------------- thick shapes (no spokes)

def _holed_disc(radius=260, n_holes=11, hole=30, seed=1):
    rng = np.random.default_rng(seed)
    n = 2 * radius + 20
    yy, xx = np.mgrid[:n, :n]
    c = n / 2
    m = np.hypot(yy - c, xx - c) < radius
    centres = []
    while len(centres) < n_holes:
        a, r = rng.uniform(0, 2 * np.pi), rng.uniform(0, radius - hole - 25)
        p = (c + r * np.sin(a), c + r * np.cos(a))
        if all(np.hypot(p[0] - q[0], p[1] - q[1]) > 2 * hole + 20 for q in centres):
            centres.append(p)
    for p in centres:
        m &= np.hypot(yy - p[0], xx - p[1]) > hole
    return m


def test_thick_disc_with_holes_has_no_spokes():
    # Analytic: 11 round holes in a disc = 11 loops; the length of the graph
    # is bounded by its thinned centreline (issue's bound [0.7, 1.35] x the
    # centreline pixel count); no straight segment longer than a junction.
    m = _holed_disc()
    g = sm.skeleton_graph(m)
    n_pix = int(sm.skeletonize(m).sum())
    assert g.cycle_rank == 11
    assert 0.7 * n_pix <= g.edge_length.sum() <= 1.35 * n_pix
    steps = np.linalg.norm(np.diff(g.points, axis=0), axis=1)
    inside = np.ones(len(steps), bool)
    inside[g.offsets[1:-1] - 1] = False  # steps that join two branches
    assert steps[inside].max() <= 2 * g.node_radius.max()


def test_thick_annulus_length():
    # Analytic: the medial circle of an annulus (R 150, half-width 30) has
    # length 2 pi R; one loop.
    n = 400
    yy, xx = np.mgrid[:n, :n]
    d = np.hypot(yy - n / 2 + 0.3, xx - n / 2 + 0.1)
    m = (d > 120) & (d < 180)
    g = sm.skeleton_graph(m)
    assert g.cycle_rank == 1
    assert g.edge_length.sum() == pytest.approx(2 * np.pi * 150, rel=0.03)


def test_thick_slab_with_tunnels():
    # Analytic: a slab 44 voxels thick pierced by 9 round tunnels has 9 loops.
    z, y, x = np.mgrid[:52, :120, :120]
    m = (z >= 4) & (z < 48) & (y >= 4) & (y < 116) & (x >= 4) & (x < 116)
    for cy in (25, 60, 95):
        for cx in (25, 60, 95):
            m &= np.hypot(y - cy, x - cx) > 8
    g = sm.skeleton_graph(m)
    n_vox = int(sm.skeletonize(m).sum())
    assert g.cycle_rank == 9 == _mask_loops(m)
    assert 0.7 * n_vox <= g.edge_length.sum() <= 1.35 * n_vox


def _centreline_length(mask, spacing=None):
    """Length of the thinned centreline: the sum of its voxel links."""
    from skelmorph.voxels import voxel_links
    sk = sm.skeletonize(mask, spacing)
    c = np.argwhere(sk)
    links = voxel_links(c, sk.shape)
    sp = np.ones(mask.ndim) if spacing is None else np.asarray(spacing, float)
    return float(np.linalg.norm((c[links[:, 0]] - c[links[:, 1]]) * sp, axis=1).sum())


@pytest.mark.parametrize("dark", [False, True])
def test_retina_photo_length_bounded_by_centreline(dark):
    # Real data: scikit-image's retina fundus photograph (skimage.data.retina,
    # CC0 per its docstring), green channel, Otsu threshold.  Without --dark
    # the mask is the whole fundus disc with the vessels as holes (a thick
    # plate); either way the graph is never longer than the thinned
    # centreline it comes from, and no step jumps across the plate.
    from skimage import data
    mask = sm.to_mask(data.retina()[..., 1], (1.0, 1.0), dark=dark)
    g = sm.skeleton_graph(mask)
    assert g.edge_length.sum() <= _centreline_length(mask)
    steps = np.linalg.norm(np.diff(g.points, axis=0), axis=1)
    inside = np.ones(len(steps), bool)
    inside[g.offsets[1:-1] - 1] = False
    assert steps[inside].max() <= 3.0  # voxel steps and merged junctions only


@pytest.mark.parametrize("name", ["foam", "lattice", "venation", "tree", "frame"])
def test_length_never_exceeds_centreline(name):
    # Construction: smoothing only shortens polylines that follow the
    # centreline voxels, and merged junctions add at most a few voxels.
    ph = sm.phantoms.make(name)
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    assert g.edge_length.sum() <= _centreline_length(ph.mask, ph.spacing)


# ------------------------------------------------------------- anisotropic voxels

def _random_walks(shape, n_walks, steps, seed):
    rng = np.random.default_rng(seed)
    m = np.zeros(shape, bool)
    for _ in range(n_walks):
        p = np.array([rng.integers(1, s - 1) for s in shape])
        for _ in range(steps):
            m[tuple(p)] = True
            p = np.clip(p + rng.integers(-1, 2, 3), 1, np.array(shape) - 2)
    return m


@pytest.mark.parametrize("spacing", [(1.5, 1, 1), (2.5, 1, 1), (3, 1, 1), (1, 2, 2)])
def test_anisotropic_thin_networks_keep_topology(spacing):
    # Reference: components (scipy, 26-connectivity) and loops (scikit-image
    # Euler number, cavities counted) of a union of 1-voxel-wide 26-connected
    # random walks equal the graph's, whatever the voxel size.
    m = ndi.binary_fill_holes(_random_walks((30, 40, 40), 12, 150, seed=5))  # cavity-free
    g = sm.skeleton_graph(m, spacing)
    comps, _ = _topology(m)
    assert g.n_components == comps
    assert g.cycle_rank == _mask_loops(m)
    assert "resampled_isotropic" in g.meta and not g.meta["resampled_isotropic"]


def test_frog_vessel_label_topology():
    # Real data shipped in a registry package: pyvista's frog tissue label
    # map (voxel 1.5 x 1 x 1).  Label 1 is blood (value from memory of the
    # frog dataset's label list).  Graph components and loops equal the
    # mask's (scipy labelling; scikit-image Euler number, cavities counted).
    examples = pytest.importorskip("pyvista.examples")
    v = examples.load_frog_tissues()
    labels = np.asarray(v.point_data[v.array_names[0]]).reshape(v.dimensions[::-1])
    spacing = tuple(float(s) for s in v.spacing[::-1])
    m = labels == 1
    box = tuple(slice(max(s.start - 1, 0), s.stop + 1) for s in ndi.find_objects(m.astype(np.uint8))[0])
    m = m[box]
    g = sm.skeleton_graph(m, spacing)
    comps, _ = _topology(m)
    assert g.n_components == comps == 110  # our run: 110 pieces
    assert g.cycle_rank == _mask_loops(m)


# ------------------------------------------------------------- no lost branches

def _fork(r0, angle, spacing=(1.0, 1.0, 1.0), seed=0, exponent=3.0, stem=40.0, daughter=None):
    """A Y in random orientation: parent radius r0, daughters at +/- angle/2."""
    rng = np.random.default_rng(seed)
    rot = Rotation.random(random_state=seed).as_matrix()
    r1 = r0 * 2.0 ** (-1.0 / exponent)
    daughter = daughter or stem
    th = np.deg2rad(angle / 2)
    dirs = np.array([[1, 0, 0], [np.cos(th), np.sin(th), 0], [np.cos(th), -np.sin(th), 0]]) @ rot.T
    sp = np.asarray(spacing, float)
    ext = stem + daughter + 4 * r0
    shape = tuple(int(np.ceil(2 * ext / s)) for s in sp)
    fork = np.array(shape) * sp / 2 + rng.uniform(-0.5, 0.5, 3) * sp
    mask = draw_tubes(shape, sp, [fork - stem * dirs[0]], [fork], r0)
    draw_tubes(shape, sp, [fork, fork], [fork + daughter * dirs[1], fork + daughter * dirs[2]], r1,
               out=mask)
    box = tuple(slice(max(a.min() - 3, 0), a.max() + 4) for a in np.nonzero(mask))
    return mask[box], tuple(sp)


@pytest.mark.parametrize("r0", [2, 3, 4, 5])
@pytest.mark.parametrize("angle", [40, 80, 100])
def test_forks_keep_three_tips(r0, angle):
    # Analytic: a Y (parent 40 voxels long) has 3 tips and 1 junction.
    m, sp = _fork(r0, angle, seed=r0 * 100 + angle)
    sk = sm.skeletonize(m)
    g = sm.skeleton_graph(m, sp)
    assert int((g.node_degree == 1).sum()) == 3
    assert int((g.node_degree >= 3).sum()) == 1
    assert sk.any()


@pytest.mark.parametrize("seed, root_radius", [
    (0, 2.5), (2, 2.5), (0, 4.0), (1, 4.0), (2, 4.0),
    # Known failure: a twig thinner than one voxel (distance 1 all along)
    # retracts into its parent within one distance bin.
    pytest.param(1, 2.5, marks=pytest.mark.xfail(strict=True, reason="sub-voxel twig retracts")),
])
def test_random_thin_trees_keep_drawn_tips(seed, root_radius):
    # Construction: the random tree phantom's truth lists its tips.
    ph = sm.phantoms.random_tree(seed=seed, root_radius=root_radius)
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    assert int((g.node_degree == 1).sum()) == ph.truth["n_tips"]


# ------------------------------------------------------------- radii

@pytest.mark.parametrize("radius", [1.5, 2.0, 3.0, 4.0, 6.0])
def test_equivalent_radius_unbiased_on_tubes(radius):
    # Analytic: a straight tube of radius r in a random direction; the
    # volume-equivalent branch radius is within 3 %.
    rng = np.random.default_rng(int(radius * 10))
    d = rng.normal(size=3)
    p = straight_tube(length=30 * max(radius, 2), radius=radius, direction=tuple(d / np.linalg.norm(d)))
    g = sm.skeleton_graph(p.mask, p.spacing)
    main = np.argmax(g.edge_length)
    assert g.edge_radius[main] == pytest.approx(radius, rel=0.03)


@pytest.mark.parametrize("r0", [2.5, 3.0, 4.0])
def test_murray_exponent_at_thin_radii(r0):
    # Murray (1926): daughters with r1 = r0 / 2^(1/3) give exponent 3.  The
    # issue's bound: exponent within [2.5, 3.5], parent radius within 10 %.
    xs = []
    for seed in range(3):
        m, sp = _fork(r0, 70, seed=seed, stem=14 * r0, daughter=18 * r0)
        b = bifurcations(sm.skeleton_graph(m, sp))
        assert len(b["murray_exponent"]) == 1
        assert b["r0"][0] == pytest.approx(r0, rel=0.10)
        xs.append(b["murray_exponent"][0])
    assert 2.5 <= np.median(xs) <= 3.5
    assert all(2.3 <= x <= 3.7 for x in xs)


def test_anisotropic_fork_radius_and_length():
    # Analytic: the same fork drawn with voxels (2, 1, 1) keeps its parent
    # radius within 10 % and its tips.
    m, sp = _fork(3.0, 70, spacing=(2.0, 1.0, 1.0), seed=11, stem=42.0, daughter=54.0)
    g = sm.skeleton_graph(m, sp)
    b = bifurcations(g)
    assert int((g.node_degree == 1).sum()) == 3
    assert b["r0"][0] == pytest.approx(3.0, rel=0.10)


def test_processing_choices_recorded():
    ph = sm.phantoms.make("y")
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    assert g.meta["thinning"] == "ordered"
    assert g.meta["resampled_isotropic"] is False
    g2 = sm.skeleton_graph(ph.mask, (2.0, 1.0, 1.0), method="lee", isotropic=True)
    assert g2.meta["thinning"] == "lee" and g2.meta["resampled_isotropic"] is True
    with pytest.raises(sm.SkelmorphError):
        sm.skeleton_graph(ph.mask, method="bogus")


# ------------------------------------------------------------- surface thinning

def _sheet_voxels(skel):
    """Skeleton voxels with two or more background pieces around them."""
    from skelmorph.thinning import background_components
    p = np.pad(skel, 1)
    return sum(background_components(p[z - 1:z + 2, y - 1:y + 2, x - 1:x + 2]) >= 2
               for z, y, x in np.argwhere(p))


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10**6), fill=st.floats(0.3, 0.8),
       aniso=st.sampled_from([(1.0, 1.0, 1.0), (1.6, 1.0, 1.0), (1.0, 2.0, 2.0)]))
def test_surface_thinning_preserves_topology(seed, fill, aniso):
    # Reference: scikit-image's Euler number and scipy's 26-component count.
    rng = np.random.default_rng(seed)
    m = ndi.binary_opening(rng.random((14, 16, 15)) < fill) | (rng.random((14, 16, 15)) < 0.02)
    sk = thin(m, aniso, keep="surfaces")
    assert not (sk & ~m).any()
    assert _topology(sk) == _topology(m)


def test_surface_thinning_keeps_plates_and_their_holes():
    # Analytic: a 5-voxel plate thins to its mid-plane; the medial surface of
    # a box stops about half a thickness short of its rims.  A hole through
    # the plate stays (Euler number 0 = one tunnel; scikit-image).
    m = np.zeros((13, 60, 60), bool)
    m[4:9, 5:55, 5:55] = True
    curves = thin(m)
    sk = thin(m, keep="surfaces")
    assert np.array_equal(np.unique(np.nonzero(sk)[0]), [6])
    assert sk.sum() >= (50 - 5 - 2) ** 2 and curves.sum() < 50
    holed = m.copy()
    yy, xx = np.mgrid[:60, :60]
    holed[:, np.hypot(yy - 30, xx - 30) < 8] = False
    sk = thin(holed, keep="surfaces")
    assert euler_number(sk, 3) == euler_number(holed, 3) == 0
    assert sk.sum() >= (50 - 7) ** 2 - np.pi * 10 ** 2


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_surface_thinning_leaves_rods_as_curves(seed):
    # Round rods of radius 3-6 voxels at random orientations thin to curves:
    # no voxel has background on two sides (common practice: the medial
    # surface of a circular cylinder is its axis).
    rng = np.random.default_rng(seed)
    d = Rotation.random(random_state=seed).apply([1.0, 0, 0])
    r = rng.uniform(3, 6)
    c = np.array([30.0, 30, 30])
    m = draw_tubes((60, 60, 60), (1.0, 1, 1), [c - 20 * d], [c + 20 * d], r)
    sk = thin(m, keep="surfaces")
    assert _sheet_voxels(sk) == 0
    assert abs(int(sk.sum()) - int(thin(m).sum())) <= 2


def test_surface_thinning_refuses_2d():
    with pytest.raises(ValueError, match="3D"):
        thin(np.ones((5, 5), bool), keep="surfaces")


def test_surface_thinning_does_not_depend_on_threads():
    import numba

    from skelmorph import thinning
    m = sm.phantoms.foam(size=40.0, cell=12.0, rod_radius=3.0, seed=3).mask
    m[10:15] = True  # a plate through the foam
    a = thin(m, keep="surfaces")
    threads, par_min = numba.get_num_threads(), thinning.PARALLEL_MIN
    try:
        thinning.PARALLEL_MIN = 0
        numba.set_num_threads(1)
        one = thin(m, keep="surfaces")
        numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
        many = thin(m, keep="surfaces")
    finally:
        numba.set_num_threads(threads)
        thinning.PARALLEL_MIN = par_min
    assert np.array_equal(one, a) and np.array_equal(many, a)
    assert _sheet_voxels(a) > 500
