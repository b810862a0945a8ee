"""Plates and rods: the solid split by the kind of its surface skeleton.

The solid is thinned to mid-surfaces and mid-axes together
(:func:`skelmorph.thinning.thin` with ``keep="surfaces"``).  Inside a
one-voxel sheet the background around a voxel falls into two pieces, one on
each side; where sheets meet along a line it falls into three or more.  This
count, the topological number of the background (``Cbar``: 6-components of
background in the 18-neighbourhood that touch the voxel; Malandain, Bertrand
& Ayache 1993), is what separates sheets from curves.  The object count of
the same classification is not used: in a 26-neighbourhood the arms of a
crossing of curves touch each other, so it cannot see curve junctions.

* **Plates.**  The 26-connected pieces of sheet voxels (``Cbar = 2``) are the
  candidate plates; one is a plate when it is wider than thick (its
  mid-surface area is at least ``(PLATE_ASPECT * mean thickness)**2``), so the
  small sheets that thinning leaves where thick rods meet are not plates.
  Plate skeleton = the plates, the sheet-junction voxels (``Cbar >= 3``)
  touching them, the skeleton voxels next to those (their rims), and spurs
  of the rims: pieces with a free end, shorter than they are thick, whose
  only contact is a plate.
* **Rods.**  The rest of the skeleton.  Its voxels with three or more rod
  neighbours, and its small sheets (where thick rods meet), are rod
  junctions; removing them and cutting at the plates
  leaves the individual rods, as in the individual trabecula segmentation
  of Liu et al. (2008).  Rod length runs along the skeleton, with the links
  into its junctions and plates.
* **Volume.**  Each solid voxel belongs to the kind of its nearest skeleton
  voxel (Euclidean, with the voxel size).  Liu et al. reconstruct each
  trabecula from its skeleton instead; the nearest-skeleton rule is ours,
  stated here because the volume fractions depend on it.
* **Junctions**, each counted once per cluster of touching voxels:
  rod-rod -- a cluster of rod junction voxels that touches two or more
  rods; plate-rod -- a cluster of rod voxels touching a plate; plate-plate
  -- a cluster of sheet-junction voxels (``Cbar >= 3``) touching a plate,
  voxels at most two apart being one cluster (digital crossings leave
  one-voxel gaps along junction lines).
  Sheets that cross may still be one connected piece (their rims meet
  past the end of the junction line), so plate-plate junctions are counted
  from the junction lines, not from pairs of plates.
  Densities are per total volume.

Mean plate thickness and rod thickness are means of the solid's local
thickness over plate and rod voxels; mean plate area is plate volume over
plate thickness, per plate.

References
----------
Malandain G, Bertrand G, Ayache N (1993) Topological segmentation of discrete
surfaces. Int J Comput Vis 10:183-197 (reference from memory).
Liu XS, Sajda P, Saha PK, Wehrli FW, Bevill G, Keaveny TM, Guo XE (2008)
Complete volumetric decomposition of individual trabecular plates and rods
and its morphological correlations with anisotropic elastic moduli in human
trabecular bone. J Bone Miner Res 23:223-235.
Stauber M, Müller R (2006) Volumetric spatial decomposition of trabecular
bone into rods and plates -- a new method for local bone morphometry. Bone
38:475-484.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from scipy import sparse
from scipy.sparse import csgraph
from scipy.spatial import cKDTree

from ..errors import InputError
from ..grid import c_strides, forward_offsets
from ..thinning import (_ADJ6, _FACE, _N18, _OFFS, _background_components, _word,
                        distance_map_sq, thin)

__all__ = ["background_numbers", "plate_rod_measures", "plate_rod_projections", "PLATE_ROD_KEYS"]

#: Keys this module adds to the bone set.
PLATE_ROD_KEYS = ("pBV/TV", "rBV/TV", "P-R ratio", "pTb.Th", "rTb.Th",
                  "rTb.l", "pTb.S", "n_plates", "n_rods", "R-R Junc.D",
                  "P-R Junc.D", "P-P Junc.D")


#: A sheet is a plate when it is at least this many times wider than thick.
PLATE_ASPECT = 2.0


@njit(cache=True)
def _numbers(img, idx, noff, adj6, n18, face):
    n = idx.size
    cbar = np.empty(n, np.int8)
    for i in range(n):
        cbar[i] = _background_components(_word(img, idx[i], noff), adj6, n18, face)
    return cbar


def background_numbers(skeleton):
    """The background's topological number at every voxel of a 3D skeleton.

    Parameters
    ----------
    skeleton : bool array (3D), one voxel thin (curves and sheets)

    Returns
    -------
    flat : int64 array, flat indices of the skeleton voxels (C order)
    cbar : int8 array, 6-components of background in the 18-neighbourhood
        touching the voxel: 1 on curves and rims, 2 inside sheets, 3 or more
        where sheets meet
    """
    skel = np.asarray(skeleton, bool)
    if skel.ndim != 3:
        raise InputError(f"skeleton types need a 3D skeleton, got {skel.ndim}D")
    nz, ny, nx = skel.shape
    img = np.zeros((nz + 2, ny + 2, nx + 2), np.uint8)
    img[1:-1, 1:-1, 1:-1] = skel
    py, px = ny + 2, nx + 2
    flat = np.flatnonzero(skel)
    z, rem = np.divmod(flat, ny * nx)
    y, x = np.divmod(rem, nx)
    padded = ((z + 1) * py + (y + 1)) * px + (x + 1)
    noff = (_OFFS[:, 0] * py * px + _OFFS[:, 1] * px + _OFFS[:, 2]).astype(np.int64)
    return flat, _numbers(img.ravel(), padded, noff, _ADJ6, _N18, _FACE)


def _links(flat, shape, spacing):
    """26-neighbour pairs among sorted flat indices and their physical lengths."""
    strides = c_strides(shape)
    coords = np.stack(np.unravel_index(flat, shape), axis=1)
    rows, cols, lens = [], [], []
    for off in forward_offsets(3):
        q = coords + off
        inside = np.all((q >= 0) & (q < np.asarray(shape)), axis=1)
        target = flat + int(off @ strides)
        pos = np.searchsorted(flat, target)
        pos[pos >= flat.size] = 0
        hit = inside & (flat[pos] == target)
        rows.append(np.flatnonzero(hit))
        cols.append(pos[hit])
        lens.append(np.full(int(hit.sum()), float(np.linalg.norm(off * spacing))))
    return np.concatenate(rows), np.concatenate(cols), np.concatenate(lens)


def _components(n, rows, cols, keep):
    """Connected components of the kept vertices (label -1 elsewhere)."""
    sel = keep[rows] & keep[cols]
    g = sparse.coo_matrix((np.ones(int(sel.sum())), (rows[sel], cols[sel])), shape=(n, n))
    _, lab = csgraph.connected_components(g, directed=False)
    lab = np.where(keep, lab, -1)
    _, lab = np.unique(lab, return_inverse=True)
    return lab - (0 if keep.all() else 1)  # label -1 stays -1 (it sorts first)


def _clusters_within(coords, reach):
    """Number of clusters of points joined when at most ``reach`` apart
    (Chebyshev distance on the voxel grid)."""
    if len(coords) == 0:
        return 0
    pairs = cKDTree(coords).query_pairs(reach, p=np.inf, output_type="ndarray")
    g = sparse.coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])),
                          shape=(len(coords),) * 2)
    return int(csgraph.connected_components(g, directed=False)[0])


def _plate_skeleton(n, rows, cols, lens, cbar, local, voxel, flat, shape):
    """Skeleton voxels of plate material, the number of plates and of
    plate-plate junction lines (see the module docstring)."""
    both_r = np.concatenate([rows, cols])
    both_c = np.concatenate([cols, rows])
    # Plates: sheet pieces wider than thick.
    sheet_lab = _components(n, rows, cols, cbar == 2)
    n_sheets = int(sheet_lab.max()) + 1
    on = sheet_lab >= 0
    count = np.bincount(sheet_lab[on], minlength=n_sheets)
    mean_local = (np.bincount(sheet_lab[on], weights=local[on], minlength=n_sheets)
                  / np.maximum(count, 1))
    is_plate = count * voxel ** (2.0 / 3.0) >= (PLATE_ASPECT * mean_local) ** 2
    plate_vox = np.zeros(n, bool)
    plate_vox[on] = is_plate[sheet_lab[on]]
    # Sheet junctions touching a plate join it, then the rims (one voxel).
    meet = cbar >= 3
    meet_lab = _components(n, rows, cols, meet)
    touched = np.unique(meet_lab[both_r[meet[both_r] & plate_vox[both_c]]])
    plate_vox[meet] = np.isin(meet_lab[meet], touched)
    rim = np.zeros(n, bool)
    rim[both_r[plate_vox[both_c]]] = True
    plate_vox |= rim
    # Digital crossings leave gaps of a voxel along junction lines: lines of
    # junction voxels within two voxels of each other are one line.
    lines = np.flatnonzero(plate_vox & meet)
    n_pp = _clusters_within(np.stack(np.unravel_index(flat[lines], shape), 1), 2)
    # Spurs of a plate's rim: rod pieces with a free end, shorter than they
    # are thick, whose only contact is a plate.  They are plate material.
    spur = _components(n, rows, cols, ~plate_vox)
    if spur.max() >= 0:
        on = spur >= 0
        k = np.bincount(spur[on])
        inner = (spur[rows] == spur[cols]) & (spur[rows] >= 0)
        size = np.bincount(spur[rows][inner], weights=lens[inner], minlength=k.size)
        thick = np.bincount(spur[on], weights=local[on], minlength=k.size) / k
        ends = np.bincount(spur[both_r[on[both_r] & plate_vox[both_c]]], minlength=k.size)
        degree = np.bincount(both_r[on[both_r] & on[both_c]], minlength=n)
        tip = np.bincount(spur[on], weights=degree[on] <= 1, minlength=k.size)
        absorb = (size < thick) & (ends > 0) & (tip > 0)
        plate_vox[on] |= absorb[spur[on]]
    return plate_vox, int(is_plate.sum()), n_pp


def _rods(n, rows, cols, lens, cbar, plate_vox):
    """Length of every rod, and the numbers of rod-rod and plate-rod junctions."""
    both_r = np.concatenate([rows, cols])
    both_c = np.concatenate([cols, rows])
    rod_vox = ~plate_vox
    keep = rod_vox[both_r] & rod_vox[both_c]
    rod_degree = np.bincount(both_r[keep], minlength=n)
    # Small sheets left where thick rods meet are part of the junction.
    rod_junction = rod_vox & ((rod_degree >= 3) | (cbar >= 2))
    seg = _components(n, rows, cols, rod_vox & ~rod_junction)
    n_rods = int(seg.max()) + 1
    junc_lab = _components(n, rows, cols, rod_junction)
    hit = rod_junction[both_r] & (seg[both_c] >= 0)
    junc_touch = np.unique(np.stack([junc_lab[both_r[hit]], seg[both_c[hit]]], 1), axis=0)
    n_rr = int(np.sum(np.bincount(junc_touch[:, 0], minlength=int(junc_lab.max()) + 1) >= 2))
    contact = np.zeros(n, bool)
    contact[both_r[rod_vox[both_r] & plate_vox[both_c]]] = True
    n_pr = int(_components(n, rows, cols, contact).max()) + 1
    # Rod length: links inside a rod, and links from it into junctions and plates.
    s_r, s_c = seg[rows], seg[cols]
    inside = (s_r == s_c) & (s_r >= 0)
    into = (s_r >= 0) & (s_c < 0)
    outof = (s_c >= 0) & (s_r < 0)
    seg_len = (np.bincount(s_r[inside], weights=lens[inside], minlength=n_rods)
               + np.bincount(s_r[into], weights=lens[into], minlength=n_rods)
               + np.bincount(s_c[outof], weights=lens[outof], minlength=n_rods))
    return seg_len, n_rr, n_pr


#: Voxels per slab of :func:`_nearest_kind` (two float32 distance maps and
#: two flags each): about 0.2 GB of work whatever the volume.
NEAREST_SLAB_VOXELS = 2 ** 24


def _nearest_kind(mask, flat, plate_vox, spacing, slab_voxels=None):
    """Solid voxels nearer a plate skeleton voxel than a rod one (ties: plate).

    Computed slab by slab along axis 0, each slab with a halo of planes:
    a core voxel's answer is that of the whole volume when its nearest
    skeleton voxel in the slab is nearer than the slab's end (a nearer
    one outside would be nearer than the end; the farther kind may then be
    inexact, but stays farther).  Where that fails the halo doubles.  Memory
    is that of one slab instead of two full distance maps.
    """
    shape = mask.shape
    nz, plane = shape[0], shape[1] * shape[2]
    sz = float(spacing[0])
    out = np.zeros(shape, bool)
    order = np.argsort(flat, kind="stable")
    flat, plate_vox = flat[order], plate_vox[order]
    core = max(1, (slab_voxels or NEAREST_SLAB_VOXELS) // max(plane, 1))
    halo = 8
    a = 0
    while a < nz:
        b = min(nz, a + core)
        lo, hi = max(0, a - halo), min(nz, b + halo)
        i, j = np.searchsorted(flat, [lo * plane, hi * plane])
        local, kind = flat[i:j] - lo * plane, plate_vox[i:j]
        near = np.ones((hi - lo) * plane, bool)
        near[local[kind]] = False
        d_plate = distance_map_sq(near.reshape(hi - lo, *shape[1:]), spacing)[a - lo:b - lo]
        near[:] = True
        near[local[~kind]] = False
        d_rod = distance_map_sq(near.reshape(hi - lo, *shape[1:]), spacing)[a - lo:b - lo]
        solid = mask[a:b]
        # Distance from each core plane to the nearest plane outside the slab.
        z = np.arange(a, b, dtype=float)
        reach = np.full(b - a, np.inf)
        if lo > 0:
            reach = np.minimum(reach, (z - lo + 1) * sz)
        if hi < nz:
            reach = np.minimum(reach, (hi - z) * sz)
        nearest = np.minimum(d_plate, d_rod)
        exact = np.all((nearest < (reach * reach)[:, None, None]) | ~solid)
        if not exact and (lo > 0 or hi < nz):
            halo *= 2
            continue
        np.less_equal(d_plate, d_rod, out=out[a:b])
        out[a:b] &= solid
        a = b
    return out


def plate_rod_measures(mask, spacing, thickness=None, dsq=None, skeleton=None, tv=None,
                       return_labels=False):
    """Plate and rod volume fractions, sizes and junction densities.

    Parameters
    ----------
    mask : bool array (3D)
        The solid; its volume is TV.
    spacing : sequence of 3 float
    thickness : float array, optional
        Local thickness map of the solid (diameters, as from the bone set).
        Without it, thickness is twice the distance to the background at
        the skeleton voxels.
    dsq : float array, optional
        Squared distance map of the solid (:func:`distance_map_sq`).
    skeleton : bool array, optional
        A surface skeleton of ``mask`` (default: computed).
    tv : float, optional
        Total volume for the fractions and densities (default: the image's).
    return_labels : bool
        Also return a uint8 volume: 0 space, 1 plate, 2 rod.

    Returns
    -------
    dict with ``pBV/TV``, ``rBV/TV`` (1), ``P-R ratio`` (pBV/rBV), ``pTb.Th``,
    ``rTb.Th`` (mean plate and rod thickness), ``rTb.l`` (mean rod length,
    unit), ``pTb.S`` (mean plate area, unit^2), ``n_plates``, ``n_rods``, and
    the junction densities ``R-R Junc.D``, ``P-R Junc.D``, ``P-P Junc.D``
    (unit^-3).  The symbols are those of Liu et al. (2008), from memory;
    ``rTb.l`` stands for their rod length symbol.  See the module docstring.
    """
    m = np.asarray(mask, bool)
    if m.ndim != 3:
        raise InputError(f"plates and rods need a 3D image, got {m.ndim}D")
    if not m.any():
        raise InputError("plates and rods need some solid; the mask is empty")
    sp = np.asarray(spacing, float)
    voxel = float(np.prod(sp))
    own_dsq = dsq is None
    if own_dsq:
        dsq = distance_map_sq(m, sp)
    if skeleton is None:
        skeleton = thin(m, sp, dsq=dsq, keep="surfaces")
    flat = np.flatnonzero(skeleton)
    local = 2.0 * np.sqrt(dsq.ravel()[flat].astype(float))  # thickness at the skeleton
    if own_dsq:
        del dsq  # only its values on the skeleton are needed (freed before the padded copy)
    flat, cbar = background_numbers(skeleton)
    n = flat.size
    rows, cols, lens = _links(flat, m.shape, sp)
    plate_vox, n_plates, n_pp = _plate_skeleton(n, rows, cols, lens, cbar, local, voxel,
                                                flat, m.shape)
    rod_vox = ~plate_vox
    seg_len, n_rr, n_pr = _rods(n, rows, cols, lens, cbar, plate_vox)
    n_rods = len(seg_len)
    plate_solid = _nearest_kind(m, flat, plate_vox, sp)
    rod_solid = m & ~plate_solid
    tv = m.size * voxel if tv is None else float(tv)
    pbv = float(np.count_nonzero(plate_solid)) * voxel
    rbv = float(np.count_nonzero(rod_solid)) * voxel

    def mean_thickness(solid, vox):
        vals = np.asarray(thickness)[solid] if thickness is not None else local[vox]
        return float(vals.mean()) if vals.size else float("nan")

    plate_th = mean_thickness(plate_solid, plate_vox)
    rod_th = mean_thickness(rod_solid, rod_vox)
    out = {
        "pBV/TV": pbv / tv, "rBV/TV": rbv / tv,
        "P-R ratio": pbv / rbv if rbv > 0 else float("nan"),  # undefined without rods
        "pTb.Th": plate_th, "rTb.Th": rod_th,
        "rTb.l": float(seg_len.mean()) if n_rods else float("nan"),
        "pTb.S": pbv / plate_th / n_plates if n_plates else float("nan"),
        "n_plates": n_plates, "n_rods": n_rods,
        "R-R Junc.D": n_rr / tv,
        "P-R Junc.D": n_pr / tv,
        "P-P Junc.D": n_pp / tv,
    }
    if return_labels:
        labels = plate_solid.astype(np.uint8)
        labels[rod_solid] = 2
        return out, labels
    return out


def plate_rod_projections(labels):
    """Plate and rod voxel counts along each axis of a label volume.

    Parameters
    ----------
    labels : uint8 array (3D), 0 space, 1 plate, 2 rod

    Returns
    -------
    list of three int32 arrays of shape (..., 2): plate and rod counts along
    axes 0, 1 and 2 (small; what the plate and rod figure draws).
    """
    labels = np.asarray(labels)
    return [np.stack([(labels == 1).sum(axis=a, dtype=np.int32),
                      (labels == 2).sum(axis=a, dtype=np.int32)], axis=-1) for a in range(3)]
