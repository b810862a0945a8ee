"""Distance-ordered, topology-preserving thinning on the anisotropic voxel grid.

The mask is thinned to one-voxel-wide centrelines by deleting *simple*
voxels -- voxels whose removal changes no component, tunnel or cavity --
in order of their Euclidean distance to the background, computed with the
real voxel size (Pudney 1998).  The grid itself is never resampled: the
voxel size only weighs the distance map, and topology is always that of
26-connected objects with 6-connected background (8/4 in 2D).

Deletion order
    Object voxels are binned by distance (bins of a quarter of the finest
    voxel size).  Within one bin, voxels are peeled in directional
    sub-passes (one per face direction, as in the sub-iterations of Lee et
    al. 1994), so that a bin of equal distances erodes symmetrically rather
    than in memory order; a voxel kept because it was not simple is tested
    again whenever a neighbour is deleted.
Anchors
    An *end point* (a voxel with exactly one object neighbour) is kept for
    good -- an anchor -- when it lies on the ridge of the distance map: its
    one neighbour is not deeper than it by more than a quarter of the step
    between them (``RIDGE_RISE``).  Deleting in order of distance leaves the ridge of a tube as the
    last part of it, so the ridge is one voxel wide when its voxels come up
    and its end is an anchor: tube ends survive, which is what the anchor
    points of distance-ordered homotopic thinning are for (Pudney 1998).
    An end point whose neighbour is clearly deeper is the tip of a surface
    bump; it is deleted like any simple voxel (end points are simple), so
    bumps leave no spurs.  Centres of maximal balls are not used as anchors,
    since on digitised surfaces nearly every boundary voxel is one.
Sheets (``keep="surfaces"``)
    Before each directional sub-pass, every voxel under test that lies
    inside a one-voxel sheet -- its background falls into two or more
    6-components, a 2-isthmus -- is kept for good.  Plates then thin to
    their mid-surfaces and rods still to curves.  The sheets are found on
    the state before the sweep because a sequential sweep would otherwise
    erode a sheet from its rim, voxel after voxel, before testing its inside
    (the persistence of isthmuses, Bertrand & Couprie 2014).
Simple points
    Tested with the topological numbers of Bertrand & Malandain (1994):
    a voxel is simple iff its 26-neighbourhood holds exactly one
    26-component of object voxels and exactly one 6-component of background
    voxels (within the 18-neighbourhood) that is 6-adjacent to it.  A 2D
    image is thinned as a one-slice volume, where this test is the 8/4 test
    of the plane.
Parallel and deterministic
    Each directional sub-pass tests its candidates slab by slab (``SLAB``
    planes along the first axis with more than one plane), in index order
    within a slab: even slabs in parallel (numba ``prange``), then odd ones.
    Slabs that are not consecutive share no 26-neighbourhood, so this equals
    one fixed sequential order, and the result does not depend on the number
    of threads (tested).  Small sweeps run on one thread.

References
----------
Pudney C (1998) Distance-ordered homotopic thinning: a skeletonization
algorithm for 3D digital images. Comput Vis Image Underst 72:404-413.
Bertrand G, Malandain G (1994) A new characterization of three-dimensional
simple points. Pattern Recognit Lett 15:169-175.
Lee TC, Kashyap RL, Chu CN (1994) Building skeleton models via 3-D medial
surface/axis thinning algorithms. CVGIP: Graph Models Image Process 56:462-478.
Bertrand G, Couprie M (2014) Isthmus-based parallel and asymmetric 3D
thinning algorithms. In: Discrete Geometry for Computer Imagery, LNCS
8668:51-62 (reference from memory).
Felzenszwalb PF, Huttenlocher DP (2012) Distance transforms of sampled
functions. Theory Comput 8:415-428.
"""

from __future__ import annotations

import os

import numba
import numpy as np
from numba import njit, prange

# GNU OpenMP aborts a process that forks after using it, and batch runs fork
# worker processes; numba's own thread pool does not have that problem.
if "NUMBA_THREADING_LAYER" not in os.environ:
    numba.config.THREADING_LAYER = "workqueue"

__all__ = ["thin", "distance_map_sq", "is_simple_config", "background_components"]

#: Width of a distance bin, as a fraction of the finest voxel size.
BIN_FRACTION = 0.25

#: An end point is an anchor when its neighbour is deeper by at most this
#: fraction of the step between them (digitised ridges wiggle by less; the
#: tip of a surface bump rises by about 0.4 step or more).
RIDGE_RISE = 0.25


# ----------------------------------------------------------------------------- tables

def _neighbour_tables():
    """Bit tables of the 3x3x3 neighbourhood (bit k = (dz+1)*9 + (dy+1)*3 + (dx+1))."""
    offs = np.array([(k // 9 - 1, (k // 3) % 3 - 1, k % 3 - 1) for k in range(27)])
    cheb = np.abs(offs[:, None] - offs[None]).max(axis=2)
    manh = np.abs(offs[:, None] - offs[None]).sum(axis=2)
    norm1 = np.abs(offs).sum(axis=1)
    centre = 13
    adj26 = np.zeros(27, np.int64)
    adj6 = np.zeros(27, np.int64)
    n18 = 0
    face = 0
    for k in range(27):
        if k != centre and norm1[k] <= 2:
            n18 |= 1 << k
        if norm1[k] == 1:
            face |= 1 << k
    for k in range(27):
        for j in range(27):
            if j == k or j == centre:
                continue
            if cheb[k, j] == 1:
                adj26[k] |= 1 << j
            if manh[k, j] == 1 and (n18 >> j) & 1:
                adj6[k] |= 1 << j
    return offs, adj26, adj6, n18, face


_OFFS, _ADJ26, _ADJ6, _N18, _FACE = _neighbour_tables()


_DEBRUIJN = np.array([0, 1, 28, 2, 29, 14, 24, 3, 30, 22, 20, 15, 25, 17, 4, 8,
                      31, 27, 13, 23, 21, 19, 16, 7, 26, 12, 18, 6, 11, 5, 10, 9], np.int64)


@njit(cache=True, inline="always")
def _lowest_bit_index(x):
    """Index of the lowest set bit of a non-zero 32-bit value (de Bruijn)."""
    low = x & -x
    return _DEBRUIJN[((low * 0x077CB531) & 0xFFFFFFFF) >> 27]


@njit(cache=True, inline="always")
def _flood(seed, allowed, adj):
    """Bits reachable from the bits of ``seed`` inside ``allowed``."""
    comp = seed
    frontier = seed
    while frontier:
        new = 0
        while frontier:
            new |= adj[_lowest_bit_index(frontier)]
            frontier &= frontier - 1
        new &= allowed & ~comp
        comp |= new
        frontier = new
    return comp


@njit(cache=True)
def _simple(word, adj26, adj6, n18, face):
    """Bertrand-Malandain test on a 27-bit neighbourhood (centre bit ignored)."""
    obj = word & ~(1 << 13) & ((1 << 27) - 1)
    if obj == 0:
        return False
    if (obj & face) == face:  # all six face neighbours: an interior voxel
        return False
    low = obj & -obj
    if _flood(low, obj, adj26) != obj:
        return False
    bg = ~word & n18
    seeds = bg & face
    low = seeds & -seeds
    comp = _flood(low, bg, adj6)
    return (comp & seeds) == seeds


@njit(cache=True)
def _background_components(word, adj6, n18, face):
    """Number of 6-components of background in the 18-neighbourhood that
    touch a face neighbour (the topological number of the background,
    Bertrand & Malandain 1994): 0 inside, 1 on a border or a curve, 2 inside
    a one-voxel sheet, more where sheets meet."""
    bg = ~word & n18
    seeds = bg & face
    n = 0
    while seeds:
        comp = _flood(seeds & -seeds, bg, adj6)
        seeds &= ~comp
        n += 1
    return n


def background_components(cube):
    """Topological number of the background around the centre of a 3x3x3
    bool array (see :func:`_background_components`); exposed for tests and
    for the classification of skeleton voxels."""
    cube = np.asarray(cube, bool).ravel()
    word = int(np.sum(cube.astype(np.int64) << np.arange(27)))
    return int(_background_components(word, _ADJ6, _N18, _FACE))


def is_simple_config(cube):
    """Whether the centre of a 3x3x3 bool array is a simple voxel (26/6).

    Exposed for tests; see the module docstring for the characterization.
    """
    cube = np.asarray(cube, bool).ravel()
    word = int(np.sum(cube.astype(np.int64) << np.arange(27)))
    return bool(_simple(word, _ADJ26, _ADJ6, _N18, _FACE))


# ----------------------------------------------------------------------------- distance map

@njit(cache=True)
def _envelope_1d(f, w, out, v, z):
    """Lower envelope of parabolas w^2 (q - i)^2 + f[i] (Felzenszwalb-Huttenlocher).

    ``f`` holds squared distances (np.inf where unknown); result into ``out``.
    """
    n = f.shape[0]
    w2 = w * w
    k = -1
    for q in range(n):
        fq = f[q]
        if fq == np.inf:
            continue
        while k >= 0:
            p = v[k]
            s = ((fq + w2 * q * q) - (f[p] + w2 * p * p)) / (2.0 * w2 * (q - p))
            if s <= z[k]:
                k -= 1
            else:
                break
        k += 1
        v[k] = q
        if k == 0:
            z[k] = -np.inf
        else:
            p = v[k - 1]
            z[k] = ((fq + w2 * q * q) - (f[p] + w2 * p * p)) / (2.0 * w2 * (q - p))
        z[k + 1] = np.inf
    if k < 0:
        for q in range(n):
            out[q] = np.inf
        return
    j = 0
    for q in range(n):
        while z[j + 1] < q:
            j += 1
        d = q - v[j]
        out[q] = w2 * d * d + f[v[j]]


@njit(cache=True)
def _column_envelope(f, w, g, v, zz):
    """Envelope of one column, run by run.

    A site with f = 0 (background) bounds every later one, so the answer
    inside a run of non-zero values depends only on the run and the zero
    sites that bound it: each run is solved on its own (with those bounds),
    and zero sites stay zero.
    """
    n = f.shape[0]
    i = 0
    while i < n:
        if f[i] == 0.0:
            g[i] = 0.0
            i += 1
            continue
        a = i
        while i < n and f[i] != 0.0:
            i += 1
        lo = a - 1 if a > 0 else a
        hi = i + 1 if i < n else i
        _envelope_1d(f[lo:hi], w, g[lo:hi], v, zz)
        if lo < a:
            g[lo] = 0.0


@njit(cache=True, parallel=True)
def _column_pass(vol, w):
    """Envelopes along the last axis of ``vol`` (a transposed view), in place,
    in parallel over the first axis."""
    n_p, n_q, n = vol.shape
    for i in prange(n_p):
        f = np.empty(n)
        g = np.empty(n)
        v = np.empty(n, np.int64)
        zz = np.empty(n + 1)
        for j in range(n_q):
            nonzero = False
            for k in range(n):
                f[k] = vol[i, j, k]
                nonzero |= f[k] != 0.0
            if not nonzero:
                continue
            _column_envelope(f, w, g, v, zz)
            for k in range(n):
                vol[i, j, k] = g[k]


@njit(cache=True, parallel=True)
def _edt_sq_3d(mask, sz, sy, sx):
    nz, ny, nx = mask.shape
    out = np.empty((nz, ny, nx), np.float32)
    # Pass 1 (x): exact 1D distances by two sweeps.
    for zi in prange(nz):
        for yi in range(ny):
            last = -1
            for xi in range(nx):
                if not mask[zi, yi, xi]:
                    last = xi
                    out[zi, yi, xi] = 0.0
                elif last < 0:
                    out[zi, yi, xi] = np.inf
                else:
                    d = (xi - last) * sx
                    out[zi, yi, xi] = d * d
            last = -1
            for xi in range(nx - 1, -1, -1):
                if not mask[zi, yi, xi]:
                    last = xi
                elif last >= 0:
                    d = (last - xi) * sx
                    if d * d < out[zi, yi, xi]:
                        out[zi, yi, xi] = d * d
    # Pass 2 (y) and 3 (z): lower envelopes along columns.
    if ny > 1:
        _column_pass(out.transpose(0, 2, 1), sy)
    if nz > 1:
        _column_pass(out.transpose(1, 2, 0), sz)
    return out


def distance_map_sq(mask, spacing):
    """Squared Euclidean distance from each voxel to the nearest background voxel.

    Exact (separable lower envelopes of parabolas, Felzenszwalb &
    Huttenlocher 2012) with anisotropic voxel size, float32, computed in
    parallel over lines.  Voxels outside the array are not background, as
    in ``scipy.ndimage.distance_transform_edt`` (equal to it up to float32
    rounding; tested); a volume without background gives ``inf``.

    Parameters
    ----------
    mask : ndarray of bool, 2D or 3D
    spacing : sequence of float, one per axis

    Returns
    -------
    ndarray of float32, same shape, squared physical distances
    """
    mask = np.asarray(mask, bool)
    sp = [float(s) for s in spacing]
    if mask.ndim == 2:
        return _edt_sq_3d(mask[None], 1.0, sp[0], sp[1])[0]
    return _edt_sq_3d(mask, sp[0], sp[1], sp[2])


# ----------------------------------------------------------------------------- thinning

PRESENT, ANCHOR, QUEUED, VISITED, KEPT = 1, 2, 4, 8, 16
#: Thickness of the slabs processed in parallel (planes); fixed so results never
#: depend on the number of threads.
SLAB = 8

#: Candidate count from which a sweep is run on several threads.
PARALLEL_MIN = 4096


@njit(cache=True, inline="always")
def _level(d, binw2_inv, top):
    """Distance bin of a squared distance (``top`` for no background at all)."""
    if d == np.inf:
        return top
    lev = int(np.sqrt(d * binw2_inv))
    return lev if lev < top else top


@njit(cache=True)
def _order_by_level(dsq, binw2_inv, nz, ny, nx, index_like):
    """Object voxels (padded flat indices, of ``index_like``'s type) sorted by
    distance bin, then index.

    A counting sort in two passes over the distance map (no per-voxel level
    array is kept).
    """
    top = 0
    for zi in range(nz):
        for yi in range(ny):
            for xi in range(nx):
                d = dsq[zi, yi, xi]
                if d > 0.0 and d != np.inf:
                    lev = int(np.sqrt(d * binw2_inv))
                    if lev + 1 > top:
                        top = lev + 1
    counts = np.zeros(top + 2, np.int64)
    for zi in range(nz):
        for yi in range(ny):
            for xi in range(nx):
                d = dsq[zi, yi, xi]
                if d > 0.0:
                    counts[_level(d, binw2_inv, top) + 1] += 1
    for i in range(1, top + 2):
        counts[i] += counts[i - 1]
    starts = counts.copy()
    order = np.empty(counts[top + 1], index_like.dtype)
    py, px = ny + 2, nx + 2
    for zi in range(nz):
        for yi in range(ny):
            for xi in range(nx):
                d = dsq[zi, yi, xi]
                if d > 0.0:
                    lev = _level(d, binw2_inv, top)
                    order[counts[lev]] = ((zi + 1) * py + (yi + 1)) * px + (xi + 1)
                    counts[lev] += 1
    return order, starts


@njit(cache=True, inline="always")
def _word(img, p, noff):
    w = 0
    for k in range(27):
        w |= (img[p + noff[k]] & 1) << k
    return w


@njit(cache=True, inline="always")
def _unpadded(p, py, px, ny, nx):
    """Flat index in the unpadded volume of padded flat index ``p``."""
    x = p % px - 1
    y = (p // px) % py - 1
    z = p // (px * py) - 1
    return (z * ny + y) * nx + x


@njit(cache=True, inline="always")
def _topology_code(w, memo, adj26, adj6, n18, face, surface):
    """Bit 1: the centre of neighbourhood ``w`` is simple; bit 2 (only with
    ``surface``): it is not simple and lies inside a one-voxel sheet (two or
    more background components around it, a 2-isthmus)."""
    # Results are memoised per neighbourhood in a small direct-mapped table
    # (entries are written whole, so concurrent use is safe).
    key = w & ~(1 << 13) & ((1 << 27) - 1)
    h = ((key * 0x9E3779B1) & 0xFFFFFFFF) >> 16
    e = memo[h]
    if (e >> 2) == key + 1:
        return e & 3
    simple = _simple(w, adj26, adj6, n18, face)
    sheet = surface and not simple and _background_components(w, adj6, n18, face) >= 2
    code = (2 if sheet else 0) | (1 if simple else 0)
    memo[h] = ((key + 1) << 2) | code
    return code


@njit(cache=True, inline="always")
def _try_delete(img, p, noff, adj26, adj6, n18, face, memo, dist, step_len, py, px, ny, nx,
                surface):
    """Test voxel ``p`` now: delete it (1), anchor it (2) or keep it (0).

    Anchors are tube ends and, with ``surface``, voxels that are inside a
    one-voxel sheet when tested (background on two sides)."""
    w = _word(img, p, noff)
    nb = w & ~(1 << 13)
    if nb == 0:
        return 0  # isolated: never deleted
    if nb & (nb - 1) == 0:
        # An end point.  It is an anchor when it lies on the distance ridge:
        # its one neighbour is not deeper by more than RIDGE_RISE steps (a
        # tube's end).  Otherwise it is the tip of a surface bump and
        # goes like any simple voxel (end points are simple).
        k = _lowest_bit_index(nb)
        q = p + noff[k]
        rise = np.sqrt(dist[_unpadded(q, py, px, ny, nx)]) - \
            np.sqrt(dist[_unpadded(p, py, px, ny, nx)])
        if rise <= RIDGE_RISE * step_len[k]:
            img[p] |= ANCHOR
            return 2
        img[p] &= ~PRESENT
        return 1
    code = _topology_code(w, memo, adj26, adj6, n18, face, surface)
    simple = (code & 1) == 1
    sheet = (code & 2) == 2
    if simple:
        img[p] &= ~PRESENT
        return 1
    if sheet:
        # A 2-isthmus: kept for good, so that sheets do not erode from their rims.
        img[p] |= ANCHOR
        return 2
    img[p] |= KEPT  # not simple: no need to test again until a neighbour goes
    return 0


@njit(cache=True, parallel=True)
def _sweep_slabs(img, cand, slab_start, n_slabs, action, noff, adj26, adj6, n18, face, memo,
                 dist, step_len, py, px, ny, nx, surface):
    """Test the candidates slab by slab, in index order within a slab.

    Even slabs run in parallel, then odd slabs: slabs at least two voxels
    thick that are not consecutive share no neighbourhood, so this equals
    a sequential pass in a fixed order whatever the number of threads.
    """
    for parity in range(2):
        n_half = (n_slabs - parity + 1) // 2
        for j in prange(n_half):
            sl = 2 * j + parity
            for i in range(slab_start[sl], slab_start[sl + 1]):
                action[i] = _try_delete(img, cand[i], noff, adj26, adj6, n18, face, memo,
                                        dist, step_len, py, px, ny, nx, surface)


@njit(cache=True)
def _thin_kernel(img, order, starts, slab_of_plane, plane, noff, dirs, adj26, adj6, n18, face,
                 dist, step_len, py, px, ny, nx, par_min, surface):
    """Distance-ordered thinning of ``img`` (padded uint8 flags) in place.

    ``plane`` is the stride of the slab axis; ``slab_of_plane`` maps a
    padded coordinate on that axis to its slab.
    """
    n_levels = starts.size - 1
    cap = max(order.size, 16)
    active = np.empty(cap, order.dtype)  # the queues hold indices of the order's type
    nxt = np.empty(cap, order.dtype)
    cand = np.empty(cap, order.dtype)
    action = np.empty(cap, np.uint8)
    n_slabs = slab_of_plane.max() + 1
    n_planes = slab_of_plane.size
    memo = np.zeros(1 << 16, np.int64)
    slab_start = np.zeros(n_slabs + 1, np.int64)
    n_deleted = 0
    for lev in range(n_levels):
        a, b = starts[lev], starts[lev + 1]
        if a == b:
            continue
        n_act = 0
        for i in range(a, b):
            p = order[i]
            img[p] |= VISITED
            active[n_act] = p
            n_act += 1
        while n_act > 0:
            n_nxt = 0
            for d in range(dirs.size):
                step = dirs[d]
                if surface:
                    # Sheets are found on the state before the sweep: a
                    # sequential sweep would otherwise erode a one-voxel sheet
                    # from its rim, one voxel after the other, before any of
                    # its inner voxels were tested.
                    for i in range(n_act):
                        p = active[i]
                        f = img[p]
                        if (f & PRESENT) == 0 or (f & ANCHOR) != 0:
                            continue
                        w = _word(img, p, noff)
                        if _topology_code(w, memo, adj26, adj6, n18, face, True) & 2:
                            img[p] = f | ANCHOR
                # Candidates: border voxels in this direction, fixed before any test.
                m = 0
                for i in range(n_act):
                    p = active[i]
                    f = img[p]
                    if (f & PRESENT) == 0 or (f & (ANCHOR | KEPT)) != 0:
                        continue
                    if img[p + step] & PRESENT:
                        continue
                    cand[m] = p
                    m += 1
                if m == 0:
                    continue
                slab_start[:] = m
                sl_prev = -1
                for i in range(m):
                    sl = slab_of_plane[(cand[i] // plane) % n_planes]
                    while sl_prev < sl:
                        sl_prev += 1
                        slab_start[sl_prev] = i
                if m >= par_min:
                    _sweep_slabs(img, cand, slab_start, n_slabs, action, noff, adj26, adj6,
                                 n18, face, memo, dist, step_len, py, px, ny, nx, surface)
                else:  # the same order, one slab after the other (no thread start-up)
                    for parity in range(2):
                        for sl in range(parity, n_slabs, 2):
                            for i in range(slab_start[sl], slab_start[sl + 1]):
                                action[i] = _try_delete(img, cand[i], noff, adj26, adj6, n18,
                                                        face, memo, dist, step_len, py, px,
                                                        ny, nx, surface)
                for i in range(m):
                    if action[i] != 1:
                        continue
                    n_deleted += 1
                    p = cand[i]
                    for k in range(27):
                        q = p + noff[k]
                        g = img[q] & ~KEPT
                        img[q] = g
                        if (g & PRESENT) and (g & VISITED) and not (g & ANCHOR) \
                                and not (g & QUEUED):
                            img[q] = g | QUEUED
                            nxt[n_nxt] = q
                            n_nxt += 1
            # Group the queue by slab (counting sort; queue order kept within a slab).
            slab_start[:] = 0
            for i in range(n_nxt):
                slab_start[slab_of_plane[(nxt[i] // plane) % n_planes] + 1] += 1
            for sl in range(n_slabs - 1):
                slab_start[sl + 1] += slab_start[sl]
            for i in range(n_nxt):
                q = nxt[i]
                img[q] &= ~QUEUED
                sl = slab_of_plane[(q // plane) % n_planes]
                active[slab_start[sl]] = q
                slab_start[sl] += 1
            n_act = n_nxt
    return n_deleted


def thin(mask, spacing=None, *, dsq=None, keep="curves"):
    """Topology-preserving thinning of a 2D or 3D mask, ordered by distance.

    Parameters
    ----------
    mask : ndarray of bool, 2D or 3D
    spacing : sequence of float, optional
        Voxel size per axis (default 1); it weighs the distance map that
        orders deletions, nothing else.
    dsq : ndarray, optional
        A precomputed squared distance map (:func:`distance_map_sq`).
    keep : {"curves", "surfaces"}
        ``"curves"`` thins to centrelines.  ``"surfaces"`` (3D only) keeps
        the mid-surfaces of plate-like parts too: a voxel found inside a
        one-voxel sheet when it is tested -- two 6-components of background
        around it, a 2-isthmus -- is kept for good, so a plate thins to its
        mid-surface instead of eroding from its rim to a curve.  This
        persistence rule is that of the isthmus-based thinnings of Bertrand
        & Couprie; rods still thin to curves.

    Returns
    -------
    ndarray of bool, same shape: one-voxel-wide centrelines (and, with
    ``keep="surfaces"``, one-voxel-thick sheets) with the mask's components,
    tunnels and cavities (26/6-connectivity in 3D, 8/4 in 2D).

    References
    ----------
    Pudney C (1998) Comput Vis Image Underst 72:404-413; Bertrand G,
    Malandain G (1994) Pattern Recognit Lett 15:169-175; Bertrand G,
    Couprie M (2014), see the module docstring.
    """
    if keep not in ("curves", "surfaces"):
        raise ValueError(f"keep must be 'curves' or 'surfaces', not {keep!r}")
    mask = np.asarray(mask, bool)
    ndim = mask.ndim
    if keep == "surfaces" and ndim != 3:
        raise ValueError("surface thinning needs a 3D mask")
    if spacing is None:
        spacing = (1.0,) * ndim
    sp = [float(s) for s in spacing]
    vol = mask[None] if ndim == 2 else mask
    sp3 = [1.0] + sp if ndim == 2 else sp
    if dsq is None:
        dsq = distance_map_sq(mask, sp)
    dsq3 = dsq[None] if ndim == 2 else dsq
    nz, ny, nx = vol.shape
    binw = BIN_FRACTION * min(sp)
    # Padded flat indices in 32 bits below 2^31 voxels (up to about 1290^3):
    # the order and the queues take half the memory.
    index = np.int32 if (nz + 2) * (ny + 2) * (nx + 2) < 2**31 else np.int64
    order, starts = _order_by_level(dsq3, 1.0 / (binw * binw), nz, ny, nx,
                                    np.empty(0, index))
    img = np.zeros((nz + 2, ny + 2, nx + 2), np.uint8)
    img[1:-1, 1:-1, 1:-1] = vol
    py, px = ny + 2, nx + 2
    noff = (_OFFS[:, 0] * py * px + _OFFS[:, 1] * px + _OFFS[:, 2]).astype(np.int64)
    dirs = []
    for axis, size in enumerate(vol.shape):
        if size > 1 or ndim == 3:
            stride = (py * px, px, 1)[axis]
            dirs += [stride, -stride]
    dirs = np.array(dirs, np.int64)
    # Slabs along the first axis with more than one plane (rows in 2D).
    axis = 0 if nz > 1 else 1
    plane = py * px if axis == 0 else px
    n_planes = (nz if axis == 0 else ny) + 2
    slab_of_plane = np.minimum(np.maximum(np.arange(n_planes) - 1, 0) // SLAB, 
                               max((n_planes - 3) // SLAB, 0)).astype(np.int64)
    step_len = np.sqrt(((_OFFS * np.asarray(sp3)) ** 2).sum(axis=1))
    _thin_kernel(img.ravel(), order, starts, slab_of_plane, plane, noff, dirs, _ADJ26, _ADJ6,
                 _N18, _FACE, np.ascontiguousarray(dsq3).ravel(), step_len, py, px, ny, nx,
                 PARALLEL_MIN, keep == "surfaces")
    del order, starts
    # The PRESENT bit (1) straight into a bool array: no uint8 temporary.
    out = np.empty(vol.shape, bool)
    np.bitwise_and(img[1:-1, 1:-1, 1:-1], PRESENT, out=out.view(np.uint8))
    return out[0] if ndim == 2 else out
