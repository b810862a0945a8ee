"""Local thickness by the maximal-inscribed-sphere method.

Hildebrand T, Rüegsegger P (1997). A new method for the model-independent
assessment of thickness in three-dimensional images. J Microsc 185:67-75.

tau(x) = 2 max{ r : x in B(c, r) inside X }.  With r(c) the Euclidean
distance from voxel centre c to the nearest background voxel centre, the open
ball |x - c| < r(c) holds no background centre, so tau(x) = 2 max{ r(c) :
|x - c| < r(c) }.  Only centres whose ball is not contained in a neighbour's
ball of at least its radius matter (Hildebrand & Rüegsegger's distance
ridge).  Containment is tested on the painted voxel sets, not on the
geometric balls: a table gives, for each radius and neighbour, the radius
the neighbour needs to cover every offset of the smaller ball, which drops
far more centres than r(n) >= r(c) + |n - c| and leaves the map unchanged
(tested against painting every voxel).  The ridge centres are painted
largest first, one radius group at a time, every ball's voxels reached by
flat-index offsets, and a voxel keeps the first (largest) value it receives.
A centre with a neighbour of larger radius (or equal, and earlier) paints
only the crescent of its ball outside that neighbour's ball, whose voxels
get at least its value anyway: on the space around a foam's surface
skeleton the painting takes about a third of the time, the whole map 0.64
(scripts/bench.py, measures).  The balls of one radius are painted by a compiled kernel, in
parallel.
"""

from __future__ import annotations

import numba
import numpy as np
from scipy import ndimage as ndi

from .. import thinning as _thinning  # noqa: F401  (selects numba's thread pool)
from ..errors import InputError
from ..grid import c_strides, neighbour_offsets

__all__ = ["local_thickness", "ridge_centres", "bounded_local_thickness", "masked_mean_sd",
           "MAX_BALL_VOXELS"]

#: :func:`bounded_local_thickness` paints balls of at most this radius, in
#: voxels; larger spaces are measured on a coarser lattice.
MAX_BALL_VOXELS = 16



@numba.njit(parallel=True, cache=True, nogil=True)
def _paint_group(out, keys, deltas, off, reach, value, nz, ny, nx):
    """Give ``value`` to the unpainted voxels of the ball around every centre
    (given as sort keys, :func:`_centre_keys`: the flat index is the low 32
    bits).  Balls inside the array are reached by flat offsets ``deltas``;
    balls within ``reach`` of a face by the offsets ``off`` (m, 3) applied to
    (z, y, x), outside voxels skipped.  All balls of one call share the
    value, so threads writing the same voxel agree."""
    plane = ny * nx
    for i in numba.prange(len(keys)):
        c = np.int64(keys[i] & np.uint64(0xFFFFFFFF))
        z = c // plane
        y = (c - z * plane) // nx
        x = c - z * plane - y * nx
        if (reach[0] <= z < nz - reach[0] and reach[1] <= y < ny - reach[1]
                and reach[2] <= x < nx - reach[2]):
            for j in range(len(deltas)):
                k = c + deltas[j]
                if out[k] == 0:
                    out[k] = value
        else:
            for j in range(off.shape[0]):
                zz = z + off[j, 0]
                yy = y + off[j, 1]
                xx = x + off[j, 2]
                if 0 <= zz < nz and 0 <= yy < ny and 0 <= xx < nx:
                    k = (zz * ny + yy) * nx + xx
                    if out[k] == 0:
                        out[k] = value


#: Ridge centres paint only their crescents (False: whole balls, the same
#: map; for benchmarks).
PAINT_CRESCENTS = True

#: Code of a centre that leans on no neighbour (it paints its whole ball).
_NO_NEIGHBOUR = 31
_START_BITS = 27


@numba.njit(parallel=True, cache=True, nogil=True)
def _lean_on_neighbours(keys, flags, flat, deltas, band_dist):
    """Replace the radius bits of every sorted centre key by the neighbour its
    ball leans on and where that neighbour's crescent starts.

    A centre c may lean on a neighbour n with r(n) > r(c), or r(n) = r(c)
    and a smaller flat index (chosen by :func:`_lean_flags`, whose flag is
    2 + j): the voxels of c's ball inside n's painted ball get a value
    >= 2 r(c) from n's ball, or from the ball n's leans on, and so on down
    an order that has no cycles (a ball of equal radius is never inside
    another), so c paints only its crescent, the offsets o with
    |o - delta_n| >= r(n).  The code is the neighbour's number
    (``_NO_NEIGHBOUR`` for none) above the index into ``band_dist[j]``
    (offsets sorted by |o - delta_j|) where |o - delta_j| reaches r(n),
    less a relative 1e-9 (an offset too many is harmless: it lies in c's
    ball)."""
    low = np.uint64(0xFFFFFFFF)
    for i in numba.prange(len(keys)):
        c = np.int64(keys[i] & low)
        j = np.int64(flags[c]) - 2
        if j < 0:
            code = np.uint64(_NO_NEIGHBOUR) << np.uint64(_START_BITS)
        else:
            rn = np.float64(flat[c + deltas[j]])
            start = np.searchsorted(band_dist[j], rn * (1.0 - 1e-9))
            code = (np.uint64(j) << np.uint64(_START_BITS)) | np.uint64(start)
        keys[i] = (code << np.uint64(32)) | np.uint64(c)


@numba.njit(parallel=True, cache=True, nogil=True)
def _paint_crescents(out, keys, deltas, off, reach, value, nz, ny, nx, m, band_rank, band_end):
    """:func:`_paint_group` for centres keyed by :func:`_lean_on_neighbours`:
    a centre leaning on neighbour j visits the offsets of ``band_rank[j]``
    from its start to ``band_end[j]`` (|o - delta_j| < r + |delta_j|: all
    of its ball that can lie outside the neighbour's) and paints those of
    its ball (rank < m); a centre leaning on none paints its whole ball."""
    plane = ny * nx
    low = np.uint64(0xFFFFFFFF)
    start_mask = np.uint64((1 << _START_BITS) - 1)
    for i in numba.prange(len(keys)):
        c = np.int64(keys[i] & low)
        code = keys[i] >> np.uint64(32)
        j = np.int64(code >> np.uint64(_START_BITS))
        z = c // plane
        y = (c - z * plane) // nx
        x = c - z * plane - y * nx
        inside = (reach[0] <= z < nz - reach[0] and reach[1] <= y < ny - reach[1]
                  and reach[2] <= x < nx - reach[2])
        if j == _NO_NEIGHBOUR:
            lo, hi = 0, m
        else:
            lo, hi = np.int64(code & start_mask), band_end[j]
        for t in range(lo, hi):
            q = t if j == _NO_NEIGHBOUR else np.int64(band_rank[j, t])
            if q >= m:
                continue
            if inside:
                k = c + deltas[q]
            else:
                zz = z + off[q, 0]
                yy = y + off[q, 1]
                xx = x + off[q, 2]
                if not (0 <= zz < nz and 0 <= yy < ny and 0 <= xx < nx):
                    continue
                k = (zz * ny + yy) * nx + xx
            if out[k] == 0:
                out[k] = value


@numba.njit(cache=True, nogil=True)
def _centre_keys(keep, radius_bits):
    """One uint64 per centre (``keep[i]`` set): the complement of its radius's
    float32 bits above its flat index, so that sorting the keys orders the
    centres by radius, largest first, then by index (radii are >= 0, whose
    bits grow with the value).  8 bytes per centre in all."""
    n = 0
    for i in range(keep.size):
        if keep[i]:
            n += 1
    keys = np.empty(n, np.uint64)
    j = 0
    for i in range(keep.size):
        if keep[i]:
            keys[j] = (np.uint64(0xFFFFFFFF - radius_bits[i]) << np.uint64(32)) | np.uint64(i)
            j += 1
    return keys


@numba.njit(cache=True, nogil=True)
def _group_starts(keys):
    """Start of every run of equal radius in sorted keys, and the end."""
    starts = [0]
    for i in range(1, len(keys)):
        if (keys[i] >> np.uint64(32)) != (keys[i - 1] >> np.uint64(32)):
            starts.append(i)
    starts.append(len(keys))
    return np.array(starts, np.int64)


@numba.njit(parallel=True, cache=True, nogil=True)
def _ridge_flags(flat, nz, ny, nx, offs, deltas, steps, table_len, need, complete, keep):
    """keep[p] = 1 for voxels p with r(p) > 0 whose painted ball is not
    inside a neighbour's painted ball (neighbours outside the array have none).

    The ball of p paints the offsets o with |o| < r(p): the first m of
    ``table_len`` (offset lengths, ascending).  ``need[m - 1, j]`` is the
    largest |o - delta_j| among them, so neighbour j paints all of them
    when r(n) > need[m - 1, j].  Radii beyond the table (when it is not
    ``complete``) use the geometric bound |o - delta| < r + |delta|."""
    n_table = len(table_len)
    for z in numba.prange(nz):
        for y in range(ny):
            for x in range(nx):
                p = (z * ny + y) * nx + x
                r = flat[p]
                if r <= 0:
                    continue
                m = np.searchsorted(table_len, r)  # offsets with |o| < r
                in_table = m < n_table or complete
                edge = z == 0 or z == nz - 1 or y == 0 or y == ny - 1 or x == 0 or x == nx - 1
                ok = 1
                for j in range(len(deltas)):
                    if edge:
                        zz, yy, xx = z + offs[j, 0], y + offs[j, 1], x + offs[j, 2]
                        if not (0 <= zz < nz and 0 <= yy < ny and 0 <= xx < nx):
                            continue
                    rn = flat[p + deltas[j]]
                    if rn < r:
                        continue
                    if in_table:
                        if rn > need[m - 1, j] * (1.0 + 1e-12):
                            ok = 0
                            break
                    elif rn >= r + steps[j]:
                        ok = 0
                        break
                keep[p] = ok


@numba.njit(parallel=True, cache=True, nogil=True)
def _lean_flags(flat, nz, ny, nx, offs, deltas, steps, keep):
    """keep[p] = 2 + j for the kept voxels (flag 1) with a neighbour j to
    lean on (:func:`_lean_on_neighbours`: r(n) > r(p), or r(n) = r(p) and n
    before p), the one with the largest r(n) - |delta_j|.  A pass of its own:
    folded into :func:`_ridge_flags`, it slowed that loop by half."""
    for z in numba.prange(nz):
        for y in range(ny):
            for x in range(nx):
                p = (z * ny + y) * nx + x
                if keep[p] != 1:
                    continue
                r = flat[p]
                edge = z == 0 or z == nz - 1 or y == 0 or y == ny - 1 or x == 0 or x == nx - 1
                lean = -1
                best = -np.inf
                for j in range(len(deltas)):
                    if edge:
                        zz, yy, xx = z + offs[j, 0], y + offs[j, 1], x + offs[j, 2]
                        if not (0 <= zz < nz and 0 <= yy < ny and 0 <= xx < nx):
                            continue
                    rn = flat[p + deltas[j]]
                    if (rn > r or (rn == r and deltas[j] < 0)) and rn - steps[j] > best:
                        best = rn - steps[j]
                        lean = j
                keep[p] = 2 + lean


#: Offsets in the containment table of the ridge test (26 float64 each);
#: larger balls fall back to the geometric bound.
RIDGE_TABLE_OFFSETS = 2 ** 17


def _containment_table(r_max, spacing, offs):
    """Offset lengths up to ``r_max`` (ascending), the running maximum of
    |o - delta_j| over them for every neighbour offset delta_j, and whether
    the table holds every offset shorter than ``r_max``."""
    off, length = _ball_offsets(r_max, spacing)
    complete = len(off) <= RIDGE_TABLE_OFFSETS
    off, length = off[:RIDGE_TABLE_OFFSETS], length[:RIDGE_TABLE_OFFSETS]
    need = np.empty((len(off), len(offs)))
    for j, delta in enumerate(offs):  # 26 columns, each vectorised
        need[:, j] = np.maximum.accumulate(np.linalg.norm((off - delta) * spacing, axis=1))
    return length, need, complete


def _ridge_flags_of(dist, spacing, lean=False):
    """Flags of the ridge voxels (uint8, flat) and the flat float32 distance
    map: one compiled pass, 1 byte of flags per voxel (no padded copy: voxels on the
    array's faces check their neighbours' bounds).  With ``lean``, a kept
    voxel's flag is 2 + the neighbour it leans on (:func:`_lean_flags`).

    A voxel is dropped when the voxel set its ball paints lies inside the
    set a neighbour's ball of at least its radius paints: every voxel it
    would paint gets at least its value from the neighbour, so the map is
    unchanged.  On digital balls this drops 70-80 % of a foam's voxels; the
    geometric test r(n) >= r(c) + |n - c| dropped 10 %.
    """
    spacing = np.asarray(spacing, float)
    d = np.asarray(dist, np.float32)
    shape3 = (1,) * (3 - d.ndim) + d.shape
    offs = neighbour_offsets(d.ndim)
    offs3 = np.zeros((len(offs), 3), np.int64)
    offs3[:, 3 - d.ndim:] = offs
    deltas = (offs3 @ c_strides(shape3)).astype(np.int64)
    steps = np.linalg.norm(offs * spacing, axis=1)
    table_len, need, complete = _containment_table(float(d.max(initial=0.0)), spacing, offs)
    keep = np.zeros(d.size, np.uint8)
    flat = np.ascontiguousarray(d).reshape(-1)
    _ridge_flags(flat, *shape3, offs3, deltas, steps, table_len, need, complete, keep)
    if lean:
        _lean_flags(flat, *shape3, offs3, deltas, steps, keep)
    return keep, flat


def ridge_centres(dist, spacing):
    """Foreground voxels whose painted ball is not inside a neighbour's.

    One compiled pass over the distance map (1 byte per voxel of flags
    besides it).

    Returns flat indices into ``dist``.
    """
    return np.flatnonzero(_ridge_flags_of(dist, spacing)[0])


def _crescent_bands(off3, ndim, spacing):
    """The neighbour offsets (padded to 3D) and their lengths, and for every
    neighbour j the ranks of the ball offsets ``off3`` sorted by
    |o - delta_j| (int32) with those lengths (float64), as
    :func:`_lean_on_neighbours` and :func:`_paint_crescents` read them."""
    sp3 = np.ones(3)
    sp3[3 - ndim:] = spacing
    nb = neighbour_offsets(ndim)
    nb3 = np.zeros((len(nb), 3), np.int64)
    nb3[:, 3 - ndim:] = nb
    steps = np.linalg.norm(nb3 * sp3, axis=1)
    rank = np.empty((len(nb3), len(off3)), np.int32)
    dist_sorted = np.empty((len(nb3), len(off3)))
    for j, delta in enumerate(nb3):  # 26 sorts of the ball offsets
        dist = np.linalg.norm((off3 - delta) * sp3, axis=1)
        order = np.argsort(dist, kind="stable")
        rank[j] = order
        dist_sorted[j] = dist[order]
    return nb3, steps, rank, dist_sorted


def _ball_offsets(r_max, spacing):
    """Integer offsets sorted by physical length, up to r_max, and their lengths."""
    spacing = np.asarray(spacing, float)
    half = np.floor(r_max / spacing).astype(int)
    grids = np.meshgrid(*[np.arange(-h, h + 1) for h in half], indexing="ij")
    off = np.stack([g.ravel() for g in grids], axis=1)
    length = np.linalg.norm(off * spacing, axis=1)
    keep = length < r_max
    off, length = off[keep], length[keep]
    order = np.argsort(length, kind="stable")
    return off[order], length[order]


@numba.njit(cache=True, nogil=True)
def _masked_sums(values, mask, centre):
    """Sum and sum of squares of ``values - centre`` where ``mask``, and the count
    (float64 accumulators, no copy of the selected values)."""
    total = 0.0
    total_sq = 0.0
    count = 0
    for i in range(values.size):
        if mask[i]:
            v = np.float64(values[i]) - centre
            total += v
            total_sq += v * v
            count += 1
    return total, total_sq, count


def masked_mean_sd(values, mask, sums=False):
    """Mean and standard deviation of a map's values inside ``mask``.

    Two compiled passes (mean, then squared deviations from it) in float64,
    with no copy of the selected values: a thickness map's phase can hold
    most of a large volume.  ``sums=True`` returns the one-pass sum, sum of
    squares and count instead (to be added over slabs).

    Returns
    -------
    mean, sd : float (NaN when the mask is empty); or sum, sum_sq, count
    """
    v = np.ascontiguousarray(values).reshape(-1)
    m = np.ascontiguousarray(mask, bool).reshape(-1).view(np.uint8)
    if v.size != m.size:
        raise ValueError("values and mask differ in size")
    total, total_sq, count = _masked_sums(v, m, 0.0)
    if sums:
        return total, total_sq, count
    if count == 0:
        return float("nan"), float("nan")
    mean = total / count
    dev, dev_sq, _ = _masked_sums(v, m, mean)
    return mean, float(np.sqrt(max(dev_sq / count - (dev / count) ** 2, 0.0)))


def _key_radius(key):
    """The float32 radius of a centre's sort key (:func:`_centre_keys`)."""
    return np.array([0xFFFFFFFF - int(key >> np.uint64(32))], np.uint32).view(np.float32)[0]


def local_thickness(mask, spacing=None, method="ridge", dist=None, reuse_dist=False):
    """Local thickness map (diameter of the largest inscribed ball), in physical units.

    Parameters
    ----------
    mask : bool array (2D or 3D)
        The phase to measure (bone for Tb.Th; marrow for Tb.Sp).  The image
        edge is not a wall: the distance transform sees only background
        voxels inside the array.
    spacing : sequence of float
    method : {'ridge', 'all'}
        Paint only distance-ridge centres (fast) or every voxel (the
        brute-force definition; same result).
    dist : array, optional
        A precomputed Euclidean distance transform of ``mask``.
    reuse_dist : bool
        Write the result into ``dist`` (float32, C-contiguous, the shape of
        ``mask``) once its ridge is read, instead of a new array: 4 bytes
        per voxel less at the peak.

    Returns
    -------
    float32 array, 0 outside ``mask``.
    """
    mask = np.asarray(mask, bool)
    spacing = np.ones(mask.ndim) if spacing is None else np.asarray(spacing, float)
    if mask.size >= 2**32:
        raise InputError(f"local thickness of {mask.size} voxels at once is beyond the "
                         "2^32 this method indexes; analyse the scan in slabs "
                         "(--memory-limit)")
    if dist is None:  # float32 from the start: the float64 map is not kept beside it
        dist = ndi.distance_transform_edt(mask, sampling=spacing).astype(np.float32)
    out_shape = mask.shape
    if not mask.any():
        return np.zeros(out_shape, np.float32)
    # Centres as sort keys (radius, then flat index; 8 bytes per centre, no
    # per-axis index arrays: the ridge can hold a quarter of the voxels of
    # thin rods, and most voxels of the space around a skeleton).
    d = np.ascontiguousarray(dist, np.float32)
    if method == "ridge":
        keep, flat = _ridge_flags_of(d, spacing, lean=PAINT_CRESCENTS)
    elif method == "all":
        keep, flat = mask.reshape(-1).view(np.uint8), d.reshape(-1)
    else:
        raise ValueError("method must be 'ridge' or 'all'")
    keys = _centre_keys(keep, flat.view(np.uint32))
    keys.sort()  # largest radius first; each radius's centres in index order
    if not len(keys):
        return np.zeros(out_shape, np.float32)
    r_max = float(_key_radius(keys[0]))
    off, off_len = _ball_offsets(r_max, spacing)
    shape3 = (1,) * (3 - len(out_shape)) + tuple(out_shape)
    off3 = np.zeros((len(off), 3), np.int64)
    off3[:, 3 - off.shape[1]:] = off
    deltas = off3 @ c_strides(shape3)
    starts = _group_starts(keys)
    radii = [_key_radius(keys[a]) for a in starts[:-1].tolist()]
    # Ridge centres paint only the crescent of their ball outside the
    # neighbour's they lean on (read while the distance map is whole).
    bands = None
    if (PAINT_CRESCENTS and method == "ridge"
            and len(off) < min(RIDGE_TABLE_OFFSETS, 1 << _START_BITS)):
        bands = _crescent_bands(off3, len(out_shape), spacing)
        _lean_on_neighbours(keys, keep, flat, bands[0] @ c_strides(shape3), bands[3])
    del flat, keep
    # Painted in place of the distance map when it may be reused (its ridge
    # is read), else into a new array; never into a padded copy.
    if (reuse_dist and isinstance(dist, np.ndarray) and dist.dtype == np.float32
            and dist.flags.c_contiguous and dist.shape == out_shape):
        result = dist
        result.fill(0)
    else:
        result = np.zeros(out_shape, np.float32)
    del d
    out = result.reshape(-1)
    # Largest radius first; a voxel keeps the first value painted on it.
    for a, b, radius in zip(starts[:-1].tolist(), starts[1:].tolist(), radii):
        m = int(np.searchsorted(off_len, radius, side="left"))  # offsets with |o| < radius
        if m == 0:
            continue
        # Balls inside the array are painted by flat offsets, the others clipped.
        reach = np.abs(off3[:m]).max(axis=0)
        value = np.float32(2 * radius)
        if bands is None:
            _paint_group(out, keys[a:b], deltas[:m], off3[:m], reach, value, *shape3)
            continue
        _, nb_steps, rank, nb_dist = bands
        end = np.array([np.searchsorted(row, (float(radius) + st) * (1 + 1e-9), side="right")
                        for row, st in zip(nb_dist, nb_steps)], np.int64)
        _paint_crescents(out, keys[a:b], deltas, off3, reach, value, *shape3, m, rank, end)
    del keys
    np.multiply(result, mask, out=result)  # 0 outside the phase, without a negated copy
    return result


def bounded_local_thickness(phase, dist, spacing, max_ball=None, step=None, reuse_dist=False):
    """Local thickness with bounded work: balls of at most ``MAX_BALL_VOXELS``.

    The painting cost grows with the volume of the balls; in a sparse
    network the space between branches holds balls hundreds of voxels
    across.  When the largest radius exceeds ``MAX_BALL_VOXELS`` voxels of
    the finest axis, the ball centres and the painted voxels are taken on
    the lattice of every k-th voxel, k = floor(largest / MAX_BALL_VOXELS),
    with the radii still read from the full-resolution distance map, and
    each voxel takes the value of its lattice point.  Below the limit the
    result is exact; above it the mean is slightly low: measured -0.7, -1.4
    and -3.5 % for k = 2, 3, 4 on plates 74 voxels apart, and -1.8 % for
    k = 2 on a foam of 48-voxel cells, where the exact painting took 40-70
    times longer (scripts/bench.py, measures).

    Parameters
    ----------
    phase : bool array
    dist : float array
        Euclidean distance map of ``phase`` (0 outside it), physical units.
    spacing : sequence of float
    max_ball : float, optional
        The radius limit in voxels (default ``MAX_BALL_VOXELS``).
    step : int, optional
        The lattice step, when it must be that of a larger volume this is a
        slab of (:mod:`skelmorph.slab_thickness`); default from ``dist``.
    reuse_dist : bool
        At full resolution, write the result into ``dist``
        (:func:`local_thickness`).

    Returns
    -------
    thickness : float32 array
    step : int
        The lattice step k (1: full resolution).
    """
    spacing = np.asarray(spacing, float)
    phase = np.asarray(phase, bool)
    largest = float(dist.max(initial=0.0)) / spacing.min()
    k = max(1, int(largest // (max_ball or MAX_BALL_VOXELS))) if step is None else int(step)
    if k == 1:
        return local_thickness(phase, spacing, dist=dist, reuse_dist=reuse_dist), 1
    sub = tuple(slice(None, None, k) for _ in range(phase.ndim))
    coarse = local_thickness(phase[sub], spacing * k, dist=dist[sub])
    for axis, n in enumerate(phase.shape):
        coarse = np.repeat(coarse, k, axis=axis)[(slice(None),) * axis + (slice(0, n),)]
    # Voxels whose lattice point lies outside the phase take the nearest
    # painted value along the lattice (a one-step dilation of the values).
    gaps = phase & (coarse == 0)
    if gaps.any():
        grown = ndi.grey_dilation(coarse, size=(2 * k + 1,) * phase.ndim)
        coarse = np.where(gaps, grown, coarse)
    return np.where(phase, coarse, np.float32(0)), k
