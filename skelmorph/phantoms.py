"""Synthetic structures with known answers, for the demo and the tests.

Every phantom is drawn in physical space (coordinates ``(z, y, x)`` or
``(y, x)`` in ``unit``) as a union of round tubes (cone frusta with round
caps) or slabs, and sampled at voxel centres.  Each function returns a
:class:`Phantom` with the mask, its voxel size and a ``truth`` dict of
analytic or as-drawn values (centreline length, loops, junctions...).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "Phantom", "draw_tubes", "straight_tube", "bent_tube", "torus", "ring2d", "helix",
    "y_bifurcation", "rod_lattice", "wire_frame", "plate_stack", "random_tree", "foam",
    "venation", "PHANTOMS", "make",
]


class Phantom(NamedTuple):
    """A synthetic mask with its voxel size and ground truth."""

    mask: np.ndarray
    spacing: tuple
    unit: str
    truth: dict


def _shape_for(extent, spacing):
    return tuple(int(np.ceil(e / s)) for e, s in zip(extent, spacing))


def draw_tubes(shape, spacing, starts, ends, r_start, r_end=None, caps=True, out=None):
    """Rasterise round tubes given by their axis segments.

    A voxel belongs to segment (a, b) when its centre lies within r(t) of the
    axis point a + t (b - a), with r interpolated linearly from ``r_start``
    to ``r_end``.  With ``caps`` the ends are rounded (t clipped to [0, 1]),
    otherwise cut flat.

    Parameters
    ----------
    shape : tuple of int
    spacing : tuple of float
    starts, ends : (m, d) arrays of physical coordinates
    r_start, r_end : float or (m,) arrays of radii
    caps : bool
    out : ndarray of bool, optional
        Drawn into in place.

    Returns
    -------
    ndarray of bool
    """
    sp = np.asarray(spacing, float)
    starts = np.atleast_2d(np.asarray(starts, float))
    ends = np.atleast_2d(np.asarray(ends, float))
    m = len(starts)
    ra = np.broadcast_to(np.asarray(r_start, float), (m,))
    rb = ra if r_end is None else np.broadcast_to(np.asarray(r_end, float), (m,))
    mask = np.zeros(shape, bool) if out is None else out
    shape_arr = np.asarray(shape)
    for a, b, r0, r1 in zip(starts, ends, ra, rb):  # one segment at a time, voxels vectorised
        rmax = max(r0, r1)
        lo = np.maximum(np.floor((np.minimum(a, b) - rmax) / sp).astype(int) - 1, 0)
        hi = np.minimum(np.ceil((np.maximum(a, b) + rmax) / sp).astype(int) + 2, shape_arr)
        if np.any(hi <= lo):
            continue
        grids = np.meshgrid(*[(np.arange(l, h) + 0.5) * s for l, h, s in zip(lo, hi, sp)],
                            indexing="ij", sparse=True)
        ab = b - a
        L2 = float(ab @ ab)
        rel = [g - c for g, c in zip(grids, a)]
        t = sum(r * c for r, c in zip(rel, ab)) / L2 if L2 > 0 else 0.0 * rel[0]
        inside_t = np.ones(np.broadcast(*rel).shape, bool) if caps else (t >= 0) & (t <= 1)
        t = np.clip(t, 0.0, 1.0)
        d2 = sum((r - t * c) ** 2 for r, c in zip(rel, ab))
        rad = r0 + t * (r1 - r0)
        region = tuple(slice(l, h) for l, h in zip(lo, hi))
        mask[region] |= (d2 <= rad**2) & inside_t
    return mask


def _polyline_tube(shape, spacing, pts, radius, caps=True, out=None):
    pts = np.asarray(pts, float)
    return draw_tubes(shape, spacing, pts[:-1], pts[1:], radius, caps=caps, out=out)


def _on_centre(x, spacing):
    """Move coordinates to the nearest voxel centre.

    Axis-aligned tubes whose axis falls between voxel centres have an even
    cross-section, which 3D thinning erodes from the ends; real data rarely
    line up like that, phantoms should not either.
    """
    sp = np.asarray(spacing, float)
    return (np.floor(np.asarray(x, float) / sp) + 0.5) * sp


def _spacing(spacing, ndim):
    return tuple(float(s) for s in np.broadcast_to(np.asarray(spacing, float), (ndim,)))


# ----------------------------------------------------------------------------- simple bodies

def straight_tube(length=60.0, radius=5.0, direction=(1.0, 2.0, 3.0), spacing=1.0, caps=False,
                  margin=4.0, unit="um"):
    """A straight round tube along ``direction`` (z, y, x), flat ends by default.

    Truth: ``axis_length`` (= ``length``), ``radius``, tips 2, loops 0.
    """
    sp = _spacing(spacing, len(direction))
    d = np.asarray(direction, float)
    d /= np.linalg.norm(d)
    half = 0.5 * length * np.abs(d)
    extent = 2 * half + 2 * (radius + margin)
    centre = _on_centre(extent / 2, sp)
    a, b = centre - 0.5 * length * d, centre + 0.5 * length * d
    mask = draw_tubes(_shape_for(extent, sp), sp, [a], [b], radius, caps=caps)
    truth = dict(axis_length=float(length), radius=float(radius), n_tips=2, n_junctions=0,
                 cycle_rank=0, n_components=1, start=a.tolist(), end=b.tolist())
    return Phantom(mask, sp, unit, truth)


def bent_tube(bend_radius=30.0, angle=np.pi / 2, radius=4.0, spacing=1.0, margin=4.0, unit="um"):
    """A tube bent along a circular arc in a 3D volume (round caps).

    Truth: ``axis_length`` = bend_radius x angle, tortuosity of the arc.
    """
    sp = _spacing(spacing, 3)
    t = np.linspace(0, angle, max(int(np.ceil(bend_radius * angle)), 8) + 1)
    pad = radius + margin
    pts = np.column_stack([np.full_like(t, _on_centre([pad], sp[:1])[0]), pad + bend_radius * np.sin(t),
                           pad + bend_radius * (1 - np.cos(t))])
    extent = pts.max(axis=0) + pad
    mask = _polyline_tube(_shape_for(extent, sp), sp, pts, radius)
    chord = 2 * bend_radius * np.sin(angle / 2)
    truth = dict(axis_length=float(bend_radius * angle), chord=float(chord),
                 tortuosity=float(bend_radius * angle / chord), radius=float(radius),
                 n_tips=2, n_junctions=0, cycle_rank=0, n_components=1)
    return Phantom(mask, sp, unit, truth)


def torus(major_radius=30.0, tube_radius=5.0, spacing=1.0, margin=3.0, unit="um"):
    """A ring: torus in the y-x plane.

    Truth: centreline 2 pi R, one loop (cycle rank 1), one component, Euler
    characteristic 0, volume 2 pi^2 R r^2.
    """
    sp = _spacing(spacing, 3)
    R, r = float(major_radius), float(tube_radius)
    n = max(int(np.ceil(2 * np.pi * R / 1.0)), 24)
    t = np.linspace(0, 2 * np.pi, n + 1)
    pad = r + margin
    c = _on_centre([pad, R + pad, R + pad], sp)
    pts = c + np.column_stack([np.zeros_like(t), R * np.sin(t), R * np.cos(t)])
    extent = np.array([2 * pad, 2 * (R + pad), 2 * (R + pad)])
    mask = _polyline_tube(_shape_for(extent, sp), sp, pts, r)
    truth = dict(axis_length=float(2 * np.pi * R), cycle_rank=1, n_components=1, n_junctions=0,
                 n_tips=0, euler=0, volume=float(2 * np.pi**2 * R * r * r), radius=r)
    return Phantom(mask, sp, unit, truth)


def ring2d(radius=40.0, width=6.0, spacing=1.0, margin=4.0, unit="um"):
    """A 2D annulus (a closed vein).  Truth: centreline 2 pi R, one loop."""
    sp = _spacing(spacing, 2)
    R = float(radius)
    n = max(int(np.ceil(2 * np.pi * R)), 24)
    t = np.linspace(0, 2 * np.pi, n + 1)
    pad = width / 2 + margin
    pts = _on_centre([R + pad] * 2, sp) + np.column_stack([R * np.sin(t), R * np.cos(t)])
    extent = np.full(2, 2 * (R + pad))
    mask = _polyline_tube(_shape_for(extent, sp), sp, pts, width / 2)
    truth = dict(axis_length=float(2 * np.pi * R), cycle_rank=1, n_components=1, n_junctions=0,
                 n_tips=0, euler=0)
    return Phantom(mask, sp, unit, truth)


def helix(a=15.0, c=5.0, turns=3.0, radius=3.0, spacing=1.0, margin=3.0, unit="um"):
    """A helical tube x = a cos t, y = a sin t, z = c t (round caps).

    Truth (helix formulas): length 2 pi N sqrt(a^2 + c^2), chord 2 pi N c,
    distance metric sqrt(1 + (a / c)^2).
    """
    sp = _spacing(spacing, 3)
    tmax = 2 * np.pi * turns
    n = int(np.ceil(tmax * np.hypot(a, c) / 0.5))
    t = np.linspace(0, tmax, n + 1)
    pad = radius + margin
    pts = np.column_stack([pad + c * t, pad + a + a * np.sin(t), pad + a + a * np.cos(t)])
    extent = np.array([2 * pad + c * tmax, 2 * (a + pad), 2 * (a + pad)])
    mask = _polyline_tube(_shape_for(extent, sp), sp, pts, radius)
    L = tmax * np.hypot(a, c)
    chord = tmax * c
    truth = dict(axis_length=float(L), chord=float(chord), distance_metric=float(L / chord),
                 n_tips=2, n_junctions=0, cycle_rank=0, n_components=1)
    return Phantom(mask, sp, unit, truth)


def y_bifurcation(stem_length=35.0, daughter_length=60.0, r0=5.0, half_angle=30.0,
                  exponent=3.0, spacing=1.0, margin=3.0, unit="um"):
    """A Y: a stem splitting into two daughters at +/- ``half_angle`` degrees.

    Daughter radii follow r0^x = 2 r^x (Murray's law for x = 3; Murray 1926,
    PNAS 12:207).  Drawn in the y-x plane of a thin 3D volume.

    Truth: 1 junction, 3 tips, daughter angle 2 x half_angle, radii, exponent.
    """
    sp = _spacing(spacing, 3)
    r1 = r0 * 2.0 ** (-1.0 / exponent)
    th = np.deg2rad(half_angle)
    pad = r0 + margin
    width = 2 * daughter_length * np.sin(th) + 2 * pad
    base = _on_centre([pad, pad, width / 2], sp)
    fork = base + [0, stem_length, 0]
    ends = [fork + daughter_length * np.array([0, np.cos(th), s * np.sin(th)]) for s in (-1, 1)]
    extent = np.array([2 * pad, stem_length + daughter_length * np.cos(th) + 2 * pad, width])
    shape = _shape_for(extent, sp)
    mask = draw_tubes(shape, sp, [base], [fork], r0)
    draw_tubes(shape, sp, [fork, fork], ends, r1, out=mask)
    truth = dict(n_junctions=1, n_tips=3, cycle_rank=0, n_components=1,
                 axis_length=float(stem_length + 2 * daughter_length), radii=[r0, r1, r1],
                 daughter_angle=float(2 * half_angle), murray_exponent=float(exponent),
                 fork=fork.tolist(), base=base.tolist())
    return Phantom(mask, sp, unit, truth)


# ----------------------------------------------------------------------------- networks

def _lattice_segments(n, pitch, lo, hi, offset=0.0):
    """Axis-aligned rods through the nodes (i + 0.5) * pitch, clipped to [lo, hi]."""
    idx = (np.arange(n) + 0.5) * pitch
    starts, ends = [], []
    idx = idx + offset
    for axis in range(3):
        others = [a for a in range(3) if a != axis]
        for p in idx:
            for q in idx:
                a = np.zeros(3)
                a[others[0]], a[others[1]] = p, q
                b = a.copy()
                a[axis], b[axis] = lo, hi
                starts.append(a)
                ends.append(b)
    return np.array(starts), np.array(ends)


def rod_lattice(n_cells=3, pitch=16.0, rod_radius=2.5, spacing=1.0, unit="um"):
    """A cubic lattice of round rods cut by the box faces (trabecular-like).

    ``n_cells`` nodes per axis at (i + 1/2) x pitch; rods run through the
    whole box, so each face cuts n^2 rods.

    Truth (counting argument): n^3 junctions of degree 6, 6 n^2 tips on the
    faces, cycle rank 2n^3 - 3n^2 + 1, one component; per unit cell one node
    and three rods, so Conn.D -> 2 / pitch^3 in the infinite lattice.
    """
    sp = _spacing(spacing, 3)
    size = n_cells * pitch
    node0 = _on_centre([0.5 * pitch] * 3, sp)[0] - 0.5 * pitch  # rod axes on voxel centres
    s, e = _lattice_segments(n_cells, pitch, 0.0, size, offset=node0)
    mask = draw_tubes(_shape_for([size] * 3, sp), sp, s, e, rod_radius, caps=False)
    n = n_cells
    truth = dict(n_junctions=n**3, n_tips=6 * n * n, cycle_rank=2 * n**3 - 3 * n * n + 1,
                 n_components=1, pitch=float(pitch), conn_density=2.0 / pitch**3,
                 axis_length=float(3 * n * n * size))
    return Phantom(mask, sp, unit, truth)


def wire_frame(n_nodes=2, pitch=20.0, rod_radius=2.5, spacing=1.0, margin=4.0, unit="um"):
    """A closed cubic frame of ``n_nodes``^3 nodes joined by round rods.

    ``n_nodes=2`` is the wire-frame cube (graph Q3: 8 nodes, 12 edges).
    Truth: V = N^3 junctions, E = 3 N^2 (N - 1) branches, cycle rank
    E - V + 1 (5, 28, 81 for N = 2, 3, 4), no tips.
    """
    sp = _spacing(spacing, 3)
    N = n_nodes
    pad = rod_radius + margin
    coords = _on_centre([pad], sp[:1])[0] + pitch * np.arange(N)
    grid = np.stack(np.meshgrid(coords, coords, coords, indexing="ij"), -1).reshape(-1, 3)
    starts, ends = [], []
    for axis in range(3):
        step = np.zeros(3)
        step[axis] = pitch
        sel = grid[:, axis] < coords[-1] - 1e-9
        starts.append(grid[sel])
        ends.append(grid[sel] + step)
    starts, ends = np.concatenate(starts), np.concatenate(ends)
    extent = np.full(3, 2 * pad + pitch * (N - 1))
    mask = draw_tubes(_shape_for(extent, sp), sp, starts, ends, rod_radius)
    E = 3 * N * N * (N - 1)
    truth = dict(n_junctions=N**3, n_nodes=N**3, n_branches=E, n_tips=0, n_components=1,
                 cycle_rank=E - N**3 + 1, axis_length=float(E * pitch))
    return Phantom(mask, sp, unit, truth)


def plate_stack(thickness=4.0, period=16.0, n_plates=4, size=48.0, spacing=1.0, unit="um"):
    """Parallel plates normal to z, spanning the whole y-x extent.

    Truth: BV/TV = t/p, plate thickness t, separation p - t, number 1/p.
    """
    sp = _spacing(spacing, 3)
    depth = n_plates * period
    shape = _shape_for([depth, size, size], sp)
    z = (np.arange(shape[0]) + 0.5) * sp[0]
    in_plate = np.mod(z - (period - thickness) / 2, period) < thickness
    mask = np.broadcast_to(in_plate[:, None, None], shape).copy()
    truth = {"BV/TV": thickness / period, "Tb.Th": float(thickness),
             "Tb.Sp": float(period - thickness), "Tb.N": 1.0 / period, "n_plates": int(n_plates)}
    return Phantom(mask, sp, unit, truth)


def random_tree(generations=4, seed=0, root_radius=4.0, root_length=30.0, length_ratio=0.75,
                spread=35.0, exponent=3.0, spacing=1.0, margin=3.0, unit="um"):
    """A seeded random branching tree (vessel-like), binary, with Murray radii.

    Each branch splits into two daughters with radius r 2^(-1/exponent),
    rotated randomly about the parent axis and deflected by about
    ``spread`` degrees.  Truth (as drawn; overlaps between distant branches
    are possible but rare): total axis length, tips, junctions.
    """
    rng = np.random.default_rng(seed)
    sp = _spacing(spacing, 3)
    segs = []  # (start, end, radius)

    def grow(start, direction, length, radius, gen):
        end = start + direction * length
        segs.append((start, end, radius))
        if gen == 0:
            return
        perp = np.cross(direction, rng.normal(size=3))
        perp /= np.linalg.norm(perp)
        for sign in (-1, 1):
            ang = np.deg2rad(spread * rng.uniform(0.7, 1.3))
            d = np.cos(ang) * direction + sign * np.sin(ang) * perp
            d /= np.linalg.norm(d)
            grow(end, d, length * length_ratio * rng.uniform(0.85, 1.15),
                 radius * 2.0 ** (-1.0 / exponent), gen - 1)

    grow(np.zeros(3), np.array([1.0, 0.0, 0.0]), root_length, root_radius, generations)
    starts = np.array([s for s, _, _ in segs])
    ends = np.array([e for _, e, _ in segs])
    radii = np.array([r for _, _, r in segs])
    lo = np.minimum(starts.min(0), ends.min(0)) - root_radius - margin
    shift = _on_centre(-lo, sp)  # the root axis on voxel centres
    starts, ends = starts + shift, ends + shift
    extent = np.maximum(starts.max(0), ends.max(0)) + root_radius + margin + np.asarray(sp)
    mask = draw_tubes(_shape_for(extent, sp), sp, starts, ends, radii)
    n_tips = 2**generations + 1
    truth = dict(n_tips=n_tips, n_junctions=2**generations - 1, cycle_rank=0, n_components=1,
                 axis_length=float(np.linalg.norm(ends - starts, axis=1).sum()),
                 root=starts[0].tolist(), seed=seed)
    return Phantom(mask, sp, unit, truth)


def foam(size=64.0, cell=16.0, rod_radius=2.0, seed=0, jitter=0.35, spacing=1.0, unit="um",
         break_fraction=0.0):
    """A seeded open-cell foam (trabecular-like): rods along the edges of a
    Voronoi tessellation of jittered grid points; ``break_fraction`` of the
    rods (chosen at random) are left out, which disconnects the network.

    Truth (as drawn, before voxelisation): rod count, node count and total
    rod length inside the box; the mask's own Euler number is the reference
    for loops.
    """
    from scipy.spatial import Voronoi

    rng = np.random.default_rng(seed)
    sp = _spacing(spacing, 3)
    k = int(np.ceil(size / cell)) + 2
    g = (np.arange(k) - 0.5) * cell
    seeds = np.stack(np.meshgrid(g, g, g, indexing="ij"), -1).reshape(-1, 3)
    seeds = seeds + rng.uniform(-jitter, jitter, seeds.shape) * cell
    vor = Voronoi(seeds)
    pairs = set()
    for ridge in vor.ridge_vertices:
        if -1 in ridge:
            continue
        for a, b in zip(ridge, ridge[1:] + ridge[:1]):
            pairs.add((min(a, b), max(a, b)))
    pairs = np.array(sorted(pairs))
    v = vor.vertices
    pa, pb = v[pairs[:, 0]], v[pairs[:, 1]]
    lo, hi = -cell, size + cell
    keep = np.all((pa > lo) & (pa < hi) & (pb > lo) & (pb < hi), axis=1)
    pa, pb = pa[keep], pb[keep]
    if break_fraction > 0:
        stay = rng.random(len(pa)) >= break_fraction
        pa, pb = pa[stay], pb[stay]
    mask = draw_tubes(_shape_for([size] * 3, sp), sp, pa, pb, rod_radius)
    inside = np.all((pa >= 0) & (pa <= size) & (pb >= 0) & (pb <= size), axis=1)
    truth = dict(n_rods_inside=int(inside.sum()), rod_radius=float(rod_radius),
                 cell=float(cell), seed=seed,
                 rod_length_inside=float(np.linalg.norm(pb[inside] - pa[inside], axis=1).sum()))
    return Phantom(mask, sp, unit, truth)


def venation(cells=(4, 5), cell_size=40.0, vein_width=4.0, midrib_width=8.0, n_spurs=0,
             spur_length=12.0, seed=0, spacing=1.0, margin=6.0, unit="um"):
    """A 2D leaf-like vein network: a grid of ``cells`` areoles with a thick
    midrib, plus ``n_spurs`` free-ending veinlets inside randomly chosen areoles.

    Truth: areoles k x m exactly, free-ending veinlets = n_spurs, drawn vein
    length, lamina (grid) area, cycle rank k x m.
    """
    rng = np.random.default_rng(seed)
    sp = _spacing(spacing, 2)
    k, m = cells
    pad = midrib_width / 2 + margin
    ys = _on_centre([pad], sp[:1])[0] + cell_size * np.arange(k + 1)
    xs = _on_centre([pad], sp[1:])[0] + cell_size * np.arange(m + 1)
    starts, ends, radii = [], [], []
    for y in ys:
        starts.append([y, xs[0]])
        ends.append([y, xs[-1]])
        radii.append(vein_width / 2)
    mid = m // 2
    for j, x in enumerate(xs):
        starts.append([ys[0], x])
        ends.append([ys[-1], x])
        radii.append((midrib_width if j == mid else vein_width) / 2)
    chosen = rng.choice(k * m, size=n_spurs, replace=False) if n_spurs else []
    for c in chosen:
        i, j = divmod(int(c), m)
        a = np.array([ys[i], xs[j] + cell_size / 2])  # middle of the areole's upper vein
        starts.append(a)
        ends.append(a + [min(spur_length, cell_size / 2), 0.0])
        radii.append(vein_width / 4)
    extent = [ys[-1] + pad, xs[-1] + pad]
    starts, ends = np.array(starts, float), np.array(ends, float)
    mask = draw_tubes(_shape_for(extent, sp), sp, starts, ends, np.array(radii))
    length = float(np.linalg.norm(ends - starts, axis=1).sum())
    truth = dict(areoles=k * m, free_ending_veinlets=int(n_spurs), cycle_rank=k * m,
                 n_components=1, axis_length=length,
                 lamina_area=float((ys[-1] - ys[0]) * (xs[-1] - xs[0])))
    return Phantom(mask, sp, unit, truth)


#: Phantoms by command-line name.
def core_scan(n_cells=4, pitch=16.0, rod_radius=2.5, core_radius=None, margin=10.0, noise=12.0,
              blur=1.0, seed=0, spacing=1.0, unit="um"):
    """A grey micro-CT-like scan of a cylindrical core of a rod lattice in air.

    An invented sample: a drilled core (axis along z) of a printed lattice,
    scanned with its surrounding air.  Grey levels 20 (air), 70 (the core's
    filling between rods) and 200 (rods), blurred by a Gaussian of ``blur``
    voxels and with Gaussian noise of standard deviation ``noise``; uint8.
    ``Phantom.mask`` holds the grey image.

    Truth: the rods inside the core (``solid``, a bool array), the core's
    cross-section (``core``), their volume fraction ``bv_tv`` and the core
    volume ``core_volume``; Conn.D -> 2 / pitch^3 as for :func:`rod_lattice`.
    """
    from scipy import ndimage as ndi

    lattice = rod_lattice(n_cells, pitch, rod_radius, spacing, unit)
    sp = lattice.spacing
    nz, ny, nx = lattice.mask.shape
    pad = [int(np.ceil(margin / s)) for s in sp[1:]]
    shape = (nz, ny + 2 * pad[0], nx + 2 * pad[1])
    radius = 0.5 * n_cells * pitch - 2.0 if core_radius is None else float(core_radius)
    y = (np.arange(shape[1]) + 0.5) * sp[1] - 0.5 * shape[1] * sp[1]
    x = (np.arange(shape[2]) + 0.5) * sp[2] - 0.5 * shape[2] * sp[2]
    disc = (y[:, None] ** 2 + x[None, :] ** 2) <= radius ** 2
    core = np.broadcast_to(disc, shape).copy()
    solid = np.zeros(shape, bool)
    solid[:, pad[0]:pad[0] + ny, pad[1]:pad[1] + nx] = lattice.mask
    solid &= core
    grey = np.where(solid, 200.0, np.where(core, 70.0, 20.0)).astype(np.float32)
    if blur:
        grey = ndi.gaussian_filter(grey, blur)
    rng = np.random.default_rng(seed)
    grey += rng.normal(0.0, noise, shape).astype(np.float32)
    image = np.clip(np.round(grey), 0, 255).astype(np.uint8)
    voxel = float(np.prod(sp))
    truth = dict(solid=solid, core=core, bv_tv=float(solid.sum() / core.sum()),
                 core_volume=float(core.sum()) * voxel, conn_density=2.0 / pitch ** 3,
                 pitch=float(pitch))
    return Phantom(image, sp, unit, truth)


PHANTOMS = {
    "tube": straight_tube, "bent": bent_tube, "torus": torus, "ring2d": ring2d, "helix": helix,
    "y": y_bifurcation, "lattice": rod_lattice, "frame": wire_frame, "plates": plate_stack,
    "tree": random_tree, "foam": foam, "venation": venation, "core-scan": core_scan,
}


def make(name, **kwargs):
    """Make the phantom called ``name`` (see :data:`PHANTOMS`)."""
    from .errors import SkelmorphError

    try:
        fn = PHANTOMS[name]
    except KeyError:
        raise SkelmorphError(f"unknown phantom {name!r}; choose from {', '.join(PHANTOMS)}") from None
    return fn(**kwargs)
