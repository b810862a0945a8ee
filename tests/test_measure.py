"""Field morphometrics: the bone standard set, vessel measures, leaf venation."""

import json

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import ndimage as ndi

import skelmorph as sm
from skelmorph.cli import main
from skelmorph.errors import InputError
from skelmorph.measure.thickness import local_thickness
from skelmorph.measure.venation import venation_measures
from skelmorph.measure.vessel import (bifurcations, murray_exponent, tortuosity_indices,
                                      vessel_measures)
from skelmorph.measure.bone import (bone_measures, edge_corrected_euler, mil_fabric,
                                      surface_and_smi)
from skelmorph.phantoms import _polyline_tube

from conftest import square_rod_lattice


def ball(shape, centre, radius):
    grid = np.indices(shape).astype(float)
    return sum((g - c) ** 2 for g, c in zip(grid, centre)) < radius ** 2


# ------------------------------------------------------------------- bone
def test_plate_stack():
    """Parallel plates t = 4, P = 16 spanning the volume: BV/TV = t/P, Tb.Th = t,
    Tb.Sp = P - t, Tb.N = 1/P (methods dossier 5.7, analytic), Conn.D = 0,
    SMI = 0 for plates that span the volume, and a large DA (MIL is
    infinite along the plates)."""
    ph = sm.phantoms.make("plates", thickness=4.0, period=16.0)
    r = bone_measures(ph.mask, ph.spacing)
    assert r["BV/TV"] == pytest.approx(0.25, rel=0.05)
    assert abs(r["Tb.Th"] - 4) <= 1 and abs(r["Tb.Sp"] - 12) <= 1
    assert r["Tb.N"] == pytest.approx(1 / 16, rel=0.05)
    assert r["Conn.D"] == 0
    assert abs(r["SMI"]) < 0.05
    assert r["DA"] > 10
    # Faces cut by the volume's edge are not surface: the open mesh ends at
    # the outermost voxel centres, so each 48 x 48 plate face has area 47^2.
    assert r["BS"] == pytest.approx(2 * 4 * 47 * 47, rel=1e-6)


def test_odd_plate_parity():
    """Plate t = 5 measures 6 (distance to background voxel centres; dossier 1.3)."""
    m = np.zeros((40, 20, 20), bool)
    m[10:15] = True
    assert local_thickness(m, (1, 1, 1))[m].mean() == pytest.approx(6.0)


@pytest.mark.parametrize("n, a, d, bvtv, chi, faces, dchi", [
    (3, 10, 2, 0.104, -27, 54, -54),
    (4, 10, 4, 0.352, -80, 96, -128),
    (5, 12, 3, 0.15625, -175, 150, -250),
])
def test_square_rod_lattice(n, a, d, bvtv, chi, faces, dchi):
    """Square-rod lattice (methods dossier 5.6 table, checked there with
    scikit-image's euler_number): BV/TV = 3(d/a)^2 - 2(d/a)^3; per cell one
    node and three rods, so Delta chi = -2 n^3 and Conn.D = 2 / a^3
    (infinite-lattice argument, analytic); cubic symmetry gives DA = 1."""
    m = square_rod_lattice(n, a, d)
    assert m.mean() == pytest.approx(bvtv, abs=1e-12)
    c, dc = edge_corrected_euler(m)
    assert (c, dc) == (chi, dchi)
    assert c - dc == faces / 2
    r = bone_measures(m, (1.0, 1.0, 1.0))
    assert r["Conn.D"] == pytest.approx(2 / a**3, rel=1e-12)
    assert r["DA"] == pytest.approx(1.0, abs=0.02)


def test_round_rod_lattice_phantom():
    """The lattice phantom (round rods, pitch 16): Conn.D = 2/pitch^3 exactly."""
    ph = sm.phantoms.make("lattice")
    r = bone_measures(ph.mask, ph.spacing)
    assert r["Conn.D"] == pytest.approx(ph.truth["conn_density"], rel=1e-12)
    assert r["DA"] == pytest.approx(1.0, abs=0.02)


def test_smi_closed_bodies():
    """SMI = 12 V M / S^2 (analytic): sphere 4, torus 3 (Hildebrand &
    Rüegsegger 1997; dossier 5.2, 5.8), finite slab 80 x 80 x 6 = 1.109
    (dossier 5.7; mesh value there 1.125)."""
    sphere = ball((50, 50, 50), (24.5, 24.5, 24.5), 20)
    assert surface_and_smi(sphere, (1, 1, 1))[1] == pytest.approx(4.0, abs=0.05)
    torus = sm.phantoms.make("torus", major_radius=24, tube_radius=8)
    assert surface_and_smi(torus.mask, torus.spacing)[1] == pytest.approx(3.0, abs=0.05)
    slab = np.zeros((20, 100, 100), bool)
    slab[7:13, 10:90, 10:90] = True
    assert surface_and_smi(slab, (1, 1, 1))[1] == pytest.approx(1.109, abs=0.06)


def test_solid_with_spherical_voids():
    """A solid block with spherical voids of volume fraction phi: SMI = 4 -
    4/phi (derived from the Steiner formula with concave void surfaces;
    dossier 5.8), and Conn.D = 0 since the voids are cavities, not tunnels."""
    m = np.ones((48, 48, 48), bool)
    for c in [(12, 12, 12), (12, 35, 24), (35, 14, 32), (33, 34, 12)]:
        m &= ~ball(m.shape, c, 10)
    phi = 1 - m.mean()
    r = bone_measures(m, (1, 1, 1))
    assert r["cavities"] == 4
    assert r["Conn.D"] == 0
    assert r["SMI"] == pytest.approx(4 - 4 / phi, rel=0.03)


@given(st.integers(0, 2**31 - 1), st.sampled_from([(1.0, 1.0, 1.0), (2.0, 1.0, 1.0)]))
def test_ridge_thickness_equals_brute_force(seed, spacing):
    """Painting only distance-ridge centres gives exactly the map painted
    from every voxel (the definition, Hildebrand & Rüegsegger 1997)."""
    rng = np.random.default_rng(seed)
    m = np.zeros((18, 20, 22), bool)
    for _ in range(6):
        m |= ball(m.shape, rng.uniform(0, 20, 3), rng.uniform(2, 6))
    a = local_thickness(m, spacing)
    b = local_thickness(m, spacing, method="all")
    np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (1.5, 1.0)])
def test_ridge_thickness_in_2d_equals_brute_force(spacing):
    """2D discs crossing the image edge: the ridge painting (flat offsets
    inside, clipped balls at the edge) gives the map painted from every
    pixel (Hildebrand & Rüegsegger 1997 definition)."""
    rng = np.random.default_rng(0)
    yy, xx = np.mgrid[:60, :50]
    m = np.zeros((60, 50), bool)
    for _ in range(6):
        c, r = rng.uniform(0, 50, 2), rng.uniform(3, 9)
        m |= (yy - c[0]) ** 2 + (xx - c[1]) ** 2 < r * r
    np.testing.assert_array_equal(local_thickness(m, spacing),
                                  local_thickness(m, spacing, method="all"))


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (1.5, 1.0, 1.0), (1.0, 0.7, 1.3)])
def test_crescent_painting_equals_brute_force_around_a_skeleton(monkeypatch, spacing):
    """The space around thin walls and lines (as direct Tb.N measures it):
    many equal radii side by side, walls at the image edge.  Centres that
    paint only the crescent of their ball outside a neighbour's give the
    map painted from every voxel (Hildebrand & Rüegsegger 1997 definition),
    and the crescent painting is what ran."""
    from skelmorph.measure import thickness
    rng = np.random.default_rng(5)
    walls = np.zeros((26, 28, 30), bool)
    walls[[0, 13, 25], :, :] = True
    walls[:, rng.integers(0, 28, 2), :] = True
    walls[:, 9, 4] = walls[7, :, 21] = True
    free = ~walls
    calls = []
    paint = thickness._paint_crescents
    monkeypatch.setattr(thickness, "_paint_crescents", lambda *a: calls.append(1) or paint(*a))
    a = local_thickness(free, spacing)
    assert calls
    np.testing.assert_array_equal(a, local_thickness(free, spacing, method="all"))


def test_thickness_written_into_the_distance_map():
    """reuse_dist gives the same map, in the distance map's own buffer
    (brute-force painting of every voxel as the reference)."""
    rng = np.random.default_rng(11)
    m = np.zeros((20, 22, 18), bool)
    for _ in range(5):
        m |= ball(m.shape, rng.uniform(0, 20, 3), rng.uniform(2, 6))
    d = ndi.distance_transform_edt(m, sampling=(1.5, 1, 1)).astype(np.float32)
    got = local_thickness(m, (1.5, 1, 1), dist=d, reuse_dist=True)
    assert got is d
    np.testing.assert_array_equal(got, local_thickness(m, (1.5, 1, 1), method="all"))


def test_thickness_beyond_the_key_range_is_refused():
    """Centres are sorted by 64-bit keys holding a 32-bit voxel index: a
    phase of 2^32 voxels or more is refused before any work (a broadcast
    view, so nothing of that size is allocated)."""
    huge = np.broadcast_to(np.ones((1, 1, 1), bool), (2048, 2048, 1024))
    with pytest.raises(InputError, match="slabs"):
        local_thickness(huge)


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (1.0, 0.7, 1.3)])
def test_ridge_thickness_with_a_short_containment_table(monkeypatch, spacing):
    """Balls larger than the containment table fall back to the geometric
    test r(n) >= r(c) + |n - c| and still give the brute-force map
    (Hildebrand & Rüegsegger 1997 definition)."""
    from skelmorph.measure import thickness
    rng = np.random.default_rng(3)
    m = np.zeros((24, 26, 22), bool)
    for _ in range(5):
        m |= ball(m.shape, rng.uniform(0, 22, 3), rng.uniform(3, 8))
    b = local_thickness(m, spacing, method="all")
    monkeypatch.setattr(thickness, "RIDGE_TABLE_OFFSETS", 40)
    np.testing.assert_array_equal(local_thickness(m, spacing), b)
    centres = thickness.ridge_centres(ndi.distance_transform_edt(m, sampling=spacing), spacing)
    assert 0 < len(centres) < m.sum()


def test_mil_plates_vs_lattice():
    """Parallel plates: MIL is infinite along the plates, so DA is large
    (methods dossier 1.6 oracle: test DA > 10 on a finite sample)."""
    ph = sm.phantoms.make("plates")
    da, axes = mil_fabric(ph.mask, ph.spacing)
    assert da > 10 and len(axes) == 3


# ----------------------------------------------------------------- vessels
def test_tortuosity_analytic_curves():
    """Sampled analytic curves (methods dossier 5.3, 5.4; closed forms):
    sin x on [0, 2 pi]: L = 7.640396, DM = 1.216007, SOAM = 0.411182, one
    interior inflection; helix a = 15, c = 5, 3 turns: L = 298.0376,
    DM = 3.16228, SOAM = 1/sqrt(a^2 + c^2) = 0.063246, no inflection."""
    x = np.linspace(0, 2 * np.pi, 20001)
    t = tortuosity_indices(np.column_stack([np.sin(x), x]), [0, len(x)])
    assert t["length"][0] == pytest.approx(7.640396, rel=1e-6)
    assert t["distance_metric"][0] == pytest.approx(1.216007, rel=1e-6)
    assert t["sum_of_angles"][0] == pytest.approx(0.411182, rel=1e-4)
    assert t["inflections"][0] == 1
    assert t["inflection_count_metric"][0] == pytest.approx(2 * 1.216007, rel=1e-6)
    s = np.linspace(0, 6 * np.pi, 4001)
    h = np.column_stack([5 * s, 15 * np.sin(s), 15 * np.cos(s)])
    t = tortuosity_indices(h, [0, len(h)])
    assert t["length"][0] == pytest.approx(298.0376, rel=1e-5)
    assert t["distance_metric"][0] == pytest.approx(3.16228, rel=1e-5)
    assert t["sum_of_angles"][0] == pytest.approx(0.063246, rel=2e-3)
    assert t["inflections"][0] == 0


def test_vessel_phantoms():
    """Voxelised phantoms: helix DM within 3 % of arc length / chord
    (analytic); torus SOAM within 3 % of 1/R (dossier 5.2) and DM undefined;
    a tube along two periods of a sine has 3 interior inflections (dossier
    5.4: 2n - 1); a straight tube none."""
    helix = sm.phantoms.make("helix")
    g = sm.skeleton_graph(helix.mask, helix.spacing)
    _, cols, _ = vessel_measures(g, helix.mask, helix.spacing)
    assert cols["distance_metric"][0] == pytest.approx(helix.truth["distance_metric"], rel=0.03)
    torus = sm.phantoms.make("torus")
    g = sm.skeleton_graph(torus.mask, torus.spacing)
    _, cols, _ = vessel_measures(g, torus.mask, torus.spacing)
    assert np.isnan(cols["distance_metric"][0])
    assert cols["sum_of_angles"][0] == pytest.approx(1 / 30, rel=0.03)
    x = np.linspace(10, 130, 400)
    pts = np.column_stack([np.full_like(x, 12.0), 40 + 12 * np.sin(2 * np.pi * (x - 10) / 60), x])
    m = _polyline_tube((24, 80, 140), (1, 1, 1), pts, 3.0)
    g = sm.skeleton_graph(m, (1, 1, 1))
    _, cols, _ = vessel_measures(g, m, (1, 1, 1))
    assert cols["inflections"].tolist() == [3]
    tube = sm.phantoms.make("tube")
    g = sm.skeleton_graph(tube.mask, tube.spacing)
    _, cols, _ = vessel_measures(g, tube.mask, tube.spacing)
    assert cols["inflections"].tolist() == [0]


@pytest.mark.parametrize("radii, x", [
    ((1, 2 ** (-1 / 3), 2 ** (-1 / 3)), 3.0), ((1, 2 ** -0.5, 2 ** -0.5), 2.0),
    ((1, 0.5, 0.5), 1.0), ((10, 8, 7), 2.436345)])
def test_murray_exponent_solver(radii, x):
    """Generalised exponent r0^x = r1^x + r2^x (methods dossier 5.5 oracles)."""
    assert murray_exponent(*radii) == pytest.approx(x, abs=1e-6)
    assert np.isnan(murray_exponent(1, 1.2, 0.5))


def test_y_bifurcation_murray_and_angle():
    """Y phantom with Murray radii (r0 = 5, daughters 5 x 2^(-1/3)) at +-30
    degrees, drawn with its axes on voxel centres.  Digitised that way the
    stem is thicker and the in-plane daughters thinner than drawn (Gauss
    circle counts: 81 voxels per stem slice against 25 pi = 78.5), so the
    exponent of the *digital* object is computed here from voxel counts of
    slices across the tubes (independent of skelmorph) and the fitted one
    must match it within 0.1; daughter angle 60 +- 3 degrees (dossier 5.5,
    tolerance as stated there).  Randomly oriented forks, where no lattice
    alignment biases the counts, are checked against 3 in test_thinning.py."""
    ph = sm.phantoms.make("y")
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    b = bifurcations(g)
    assert len(b["node"]) == 1
    m, base, fork = ph.mask, ph.truth["base"], ph.truth["fork"]
    stem = np.mean([m[:, y].sum() for y in range(int(base[1]) + 10, int(fork[1]) - 10)])
    daughter = np.mean([m[:, y].sum() for y in range(int(fork[1]) + 20, int(fork[1]) + 40)]) / 2
    r0 = np.sqrt(stem / np.pi)
    r1 = np.sqrt(daughter * np.cos(np.deg2rad(30)) / np.pi)
    assert murray_exponent(r0, r1, r1) == pytest.approx(2.6, abs=0.1)  # the digital Y
    assert b["murray_exponent"][0] == pytest.approx(murray_exponent(r0, r1, r1), abs=0.1)
    assert b["r0"][0] == pytest.approx(r0, rel=0.02)
    assert b["daughter_angle"][0] == pytest.approx(60.0, abs=3.0)
    summary, _, _ = vessel_measures(g, ph.mask, ph.spacing)
    assert summary["length_density"] == pytest.approx(g.edge_length.sum() / ph.mask.size)
    assert summary["volume_fraction"] == pytest.approx(ph.mask.mean())


# ---------------------------------------------------------------- venation
@pytest.mark.parametrize("cells, spurs", [((4, 5), 0), ((3, 3), 4), ((2, 6), 6)])
def test_venation_grid(cells, spurs):
    """Grid of k x m cells: areoles = k m exactly; free-ending spurs counted
    exactly; VLA within 3 % of drawn length / grid area when the lamina is
    the grid (phantom construction)."""
    ph = sm.phantoms.make("venation", cells=cells, n_spurs=spurs)
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    r = venation_measures(g, ph.mask, ph.spacing)
    assert r["areole_count"] == cells[0] * cells[1]
    assert r["free_ending_veinlets"] == spurs
    assert r["lamina_source"] == "network outline"
    assert g.cycle_rank == cells[0] * cells[1]      # loops of the graph = areoles
    # The grid between the outer vein centrelines as the lamina.
    ys, xs = np.nonzero(ph.mask)
    region = np.zeros_like(ph.mask)
    pad = 6 + 4  # margin + half the midrib width (phantom defaults)
    region[pad:pad + 40 * cells[0] + 1, pad:pad + 40 * cells[1] + 1] = True
    rr = venation_measures(g, ph.mask, ph.spacing, region=region)
    assert rr["lamina_source"] == "region of interest"
    expected = ph.truth["axis_length"] / ph.truth["lamina_area"]
    # Thinned veinlets stop about one half-width short of their drawn tips
    # (dossier 4.1), so each spur costs a few pixels: 4 % with 6 spurs.
    assert rr["VLA"] == pytest.approx(expected, rel=0.03 + 0.002 * spurs)


# ----------------------------------------------------------- CLI and errors
def test_cli_measures(tmp_path):
    assert main(["phantom", "lattice", "--out", str(tmp_path / "l.tif")]) == 0
    out = tmp_path / "r"
    assert main(["analyze", str(tmp_path / "l.tif"), "--out", str(out), "--quiet", "--n-radii", "0",
                 "--tree", "none", "--measures", "all", "--thickness-map"]) == 0
    s = json.loads((out / "summary.json").read_text())
    for key in ("BV/TV", "BS/BV", "Tb.Th", "Tb.Th.SD", "Tb.Sp", "Tb.Sp.SD", "Tb.N", "Conn.D",
                "SMI", "DA", "length_density", "murray_exponent"):
        assert key in s
    assert "volume_fraction" not in s              # named BV/TV when the bone set ran
    assert s["units"]["Conn.D"] == "um^-3"
    assert (out / "thickness.tif").exists() and (out / "bifurcations.csv").exists()
    header = (out / "branches.csv").read_text().splitlines()[0].split(",")
    assert "distance_metric" in header and "sum_of_angles" in header
    th = sm.read_image(out / "thickness.tif")
    assert th.array.max() > 0 and th.spacing == (1.0, 1.0, 1.0)
    assert main(["phantom", "venation", "--out", str(tmp_path / "v.tif")]) == 0
    assert main(["analyze", str(tmp_path / "v.tif"), "--out", str(tmp_path / "v"), "--quiet",
                 "--measures", "venation", "--n-radii", "0", "--tree", "none"]) == 0
    s = json.loads((tmp_path / "v" / "summary.json").read_text())
    assert s["areole_count"] == 20 and s["lamina_source"] == "network outline"


def test_measure_errors(tmp_path, capsys):
    ph2 = sm.phantoms.make("venation")
    with pytest.raises(InputError, match="need a 3D image"):
        bone_measures(ph2.mask, ph2.spacing)
    ph3 = sm.phantoms.make("y")
    g3 = sm.skeleton_graph(ph3.mask, ph3.spacing)
    with pytest.raises(InputError, match="need a 2D image"):
        venation_measures(g3, ph3.mask, ph3.spacing)
    g2 = sm.skeleton_graph(ph2.mask, ph2.spacing)
    with pytest.raises(InputError, match="must match"):
        venation_measures(g2, ph2.mask, ph2.spacing, region=np.ones((3, 3), bool))
    with pytest.raises(InputError, match="empty"):
        bone_measures(np.zeros((5, 5, 5), bool), (1, 1, 1))
    with pytest.raises(InputError, match="all solid"):
        bone_measures(np.ones((5, 5, 5), bool), (1, 1, 1))
    with pytest.raises(InputError, match="unknown measure set"):
        sm.analyze(ph3.mask, measures="teeth")
    np.save(tmp_path / "v.npy", ph2.mask)
    assert main(["analyze", str(tmp_path / "v.npy"), "--spacing", "1", "--measures", "bone"]) == 2
    err = capsys.readouterr().err
    assert "bone measures need a 3D image" in err and err.count("\n") == 1


@pytest.mark.slow
def test_bounded_local_thickness_near_exact():
    # Parallel plates 74 voxels apart: the lattice of every k-th voxel keeps
    # the mean within 4 % of the exact painting (measured -0.7 % to -3.5 %),
    # and is exact when the balls are under the limit (analytic P - t = 74
    # between plates; the image edge is not a wall, so edge slabs are wider).
    from skelmorph.measure.thickness import bounded_local_thickness
    from skelmorph.thinning import distance_map_sq
    m = np.zeros((240, 40, 40), bool)
    for z in range(0, 240, 80):
        m[z:z + 6] = True
    space = ~m
    d = np.sqrt(distance_map_sq(space, (1.0, 1.0, 1.0)))
    exact, k1 = bounded_local_thickness(space, d, (1, 1, 1), max_ball=1000)
    assert k1 == 1
    assert exact[85:150].max() == pytest.approx(74 + 1, abs=1.01)  # centre-to-centre + 1
    for limit in (32, 16):
        approx, k = bounded_local_thickness(space, d, (1, 1, 1), max_ball=limit)
        assert k > 1
        assert approx[space].mean() == pytest.approx(exact[space].mean(), rel=0.04)
        assert approx[space].mean() <= exact[space].mean() + 1e-3


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 1.0, 1.0), (0.7, 1.3, 1.0)])
def test_surface_by_slabs_equals_one_mesh(spacing):
    """Areas add over faces, so slabs that keep the triangles of their own
    cube layers give the whole-volume BS and SMI (analytic identity; the
    halo covers the smoothing kernel).  Vertices are float32 relative to each
    slab's origin, so sums agree to about 1e-7, not to the last bit."""
    from skelmorph.measure.bone import surface_and_smi
    ph = sm.phantoms.make("foam", seed=3, spacing=spacing)
    m = ph.mask
    whole = surface_and_smi(m, ph.spacing, slab_voxels=10**12)
    plane = m.shape[1] * m.shape[2]
    for layers in (8, 13):
        got = surface_and_smi(m, ph.spacing, slab_voxels=layers * plane)
        assert got[0] == pytest.approx(whole[0], rel=1e-6)
        assert got[1] == pytest.approx(whole[1], rel=1e-6)
    zz, yy, xx = np.indices(m.shape)
    cyl = (yy - m.shape[1] / 2) ** 2 + (xx - m.shape[2] / 2) ** 2 < (0.4 * m.shape[2]) ** 2
    a = surface_and_smi(m & cyl, ph.spacing, roi=cyl, slab_voxels=10**12)
    b = surface_and_smi(m & cyl, ph.spacing, roi=cyl, slab_voxels=8 * plane)
    assert b[0] == pytest.approx(a[0], rel=1e-6) and b[1] == pytest.approx(a[1], rel=1e-6)


def test_euler_by_slabs_equals_whole_and_box_formula():
    """The cell weights add over any partition (Odgaard & Gundersen 1993,
    Bone 14:173, applied cell by cell), so slab sums equal the whole: chi
    equals scikit-image's euler_number (reference library), the box
    contribution equals the O&G box formula, for several slab sizes."""
    from skimage.measure import euler_number
    from skelmorph.measure.bone import edge_corrected_euler, euler_in_region
    ph = sm.phantoms.make("foam", seed=5, spacing=(1.5, 1.0, 1.0))
    m = ph.mask
    chi, dchi = edge_corrected_euler(m)
    assert chi == euler_number(m, connectivity=3)
    plane = m.shape[1] * m.shape[2]
    zz, yy, xx = np.indices(m.shape)
    cyl = (yy - m.shape[1] / 2) ** 2 + (xx - m.shape[2] / 2) ** 2 < (0.4 * m.shape[2]) ** 2
    whole_cyl = euler_in_region(m, cyl, slab_voxels=10**12)
    for layers in (4, 7, 1000):
        assert euler_in_region(m, slab_voxels=layers * plane) == chi
        assert euler_in_region(m, True, slab_voxels=layers * plane) == pytest.approx(dchi,
                                                                                    abs=1e-9)
        assert euler_in_region(m, cyl, slab_voxels=layers * plane) == pytest.approx(whole_cyl,
                                                                                   abs=1e-9)



@pytest.mark.parametrize("fill", [0.3, 0.6])
def test_euler_cell_sum_on_noise_equals_reference(fill):
    """Random images hold every local configuration: the compiled cell sum
    gives scikit-image's euler_number with connectivity 3 (reference
    library) and, for the whole box, Odgaard & Gundersen's (1993) formula."""
    from skimage.measure import euler_number
    from skelmorph.measure.bone import edge_corrected_euler, euler_in_region
    m = np.random.default_rng(4).random((23, 26, 29)) < fill
    assert euler_in_region(m, slab_voxels=5 * 26 * 29) == euler_number(m, connectivity=3)
    assert euler_in_region(m, True) == pytest.approx(edge_corrected_euler(m)[1], abs=1e-9)


def test_bone_parts_of_plane_ranges_add_up_to_the_whole():
    """Euler contributions of plane ranges and surface sums of cube-layer
    ranges (the parallel parts of the bone set in slabs) add up to the
    whole: chi equals scikit-image's euler_number (reference library)."""
    from skimage.measure import euler_number
    from skelmorph.measure.bone import euler_in_region, smi_of_sums, surface_and_smi, surface_sums
    ph = sm.phantoms.make("foam", seed=5, spacing=(1.5, 1.0, 1.0))
    m = ph.mask
    nz = m.shape[0]
    cuts = [0, 13, 40, 41, nz]
    ranges = list(zip(cuts[:-1], cuts[1:]))
    assert sum(euler_in_region(m, planes=r) for r in ranges) == euler_number(m, connectivity=3)
    whole_box = euler_in_region(m, True)
    assert sum(euler_in_region(m, True, planes=r) for r in ranges) == pytest.approx(whole_box,
                                                                                   abs=1e-9)
    bv = float(m.sum()) * float(np.prod(ph.spacing))
    bs, smi = surface_and_smi(m, ph.spacing, bv, slab_voxels=10**12)
    sums = np.sum([surface_sums(m, ph.spacing, slab_voxels=10**12, layers=r) for r in ranges],
                  axis=0)
    got_bs, got_smi = smi_of_sums(sums, bv, ph.spacing)
    assert got_bs == pytest.approx(bs, rel=1e-12) and got_smi == pytest.approx(smi, rel=1e-6)


def test_masked_mean_sd_equals_numpy():
    """The copy-free mean and SD of a map inside a mask equal numpy's on the
    selected values (reference library), and the sums add over slabs."""
    from skelmorph.measure.thickness import masked_mean_sd
    rng = np.random.default_rng(4)
    values = rng.gamma(2.0, 3.0, (30, 20, 25)).astype(np.float32)
    mask = rng.random(values.shape) < 0.3
    mean, sd = masked_mean_sd(values, mask)
    ref = values[mask].astype(np.float64)
    assert mean == pytest.approx(ref.mean(), rel=1e-12) and sd == pytest.approx(ref.std(),
                                                                                 rel=1e-10)
    parts = [masked_mean_sd(values[a:a + 7], mask[a:a + 7], sums=True) for a in range(0, 30, 7)]
    total, total_sq, count = (sum(p[i] for p in parts) for i in range(3))
    assert count == mask.sum() and total == pytest.approx(ref.sum(), rel=1e-12)
    assert total_sq == pytest.approx((ref * ref).sum(), rel=1e-12)
    assert all(np.isnan(masked_mean_sd(values, np.zeros_like(mask))))


def _mesh_area(mask, spacing, region=None, sigma=0.0):
    """Area of scikit-image's marching-cubes mesh (level 0.5) of the whole
    image, triangles a voxel inside ``region`` only: the reference."""
    from skimage.measure import marching_cubes
    vol = mask.astype(np.float32)
    if sigma:
        vol = ndi.gaussian_filter(vol, sigma)
    verts, faces, _, _ = marching_cubes(vol, level=0.5, spacing=spacing, allow_degenerate=True)
    tri = verts[faces].astype(np.float64)
    if region is not None:
        centre = tri.mean(axis=1) / np.asarray(spacing)
        share = ndi.map_coordinates(region.astype(np.float32), centre.T, order=1, mode="nearest")
        tri = tri[share > 1 - 1e-4]
    return 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]),
                                axis=1).sum()


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (1.5, 1.0, 1.0), (1.0, 0.7, 1.3)])
def test_binary_surface_from_cube_configurations_equals_the_mesh(spacing):
    """Random binary images hold every cube configuration, the ambiguous
    ones and triangles lying in cube faces included: the area from counted
    configurations equals the area of scikit-image's marching-cubes mesh
    (reference library), without a region, with a box with a hole, and
    with a random region."""
    from skelmorph.measure.cubes import binary_surface_area
    rng = np.random.default_rng(7)
    for fill in (0.5, 0.2):
        m = rng.random((30, 31, 32)) < fill
        box = np.zeros(m.shape, bool)
        box[3:25, 5:28, 2:30] = True
        box[10:16, 10:16, 10:16] = False
        for region in (None, box, rng.random(m.shape) < 0.9):
            assert binary_surface_area(m, spacing, region) == pytest.approx(
                _mesh_area(m, spacing, region), rel=1e-10)


def test_surface_sums_equal_one_whole_mesh():
    """The slab-wise BS and smoothed area (cropped meshes, own cube layers)
    equal scikit-image's single mesh of the whole image, binary and
    Gaussian-smoothed (reference library; float32 vertices: 1e-7)."""
    from skelmorph.measure.bone import surface_sums
    ph = sm.phantoms.make("foam", seed=2, spacing=(1.5, 1.0, 1.0))
    m = ph.mask
    plane = m.shape[1] * m.shape[2]
    sums = surface_sums(m, ph.spacing, sigma=1.0, slab_voxels=9 * plane)
    assert sums[0] == pytest.approx(_mesh_area(m, ph.spacing), rel=1e-9)
    assert sums[1] == pytest.approx(_mesh_area(m, ph.spacing, sigma=1.0), rel=1e-7)
