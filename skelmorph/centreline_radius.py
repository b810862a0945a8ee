"""Radius at every centreline voxel: the exact Euclidean distance to the
nearest background voxel, searched shell by shell (a KD-tree finishes the
rare thick points).  Branch radii that hold at a few voxels are in
:mod:`skelmorph.radius`."""

from __future__ import annotations


import numpy as np
from scipy import ndimage as ndi
from scipy.spatial import cKDTree

from .errors import InputError
from .grid import c_strides

__all__ = ["centreline_radius"]


def _boundary_background(mask):
    """Background voxels that touch the object (26/8-neighbourhood)."""
    grown = mask.view(np.uint8)
    for axis in range(mask.ndim):  # separable 3x3(x3) dilation
        grown = ndi.maximum_filter1d(grown, 3, axis=axis, mode="constant")
    return grown.astype(bool) & ~mask


def _radius_kdtree(mask, coords, spacing):
    border = _boundary_background(mask)
    flat = np.flatnonzero(border)
    if len(flat) == 0:
        raise InputError("the mask has no background voxels; radii are undefined")
    pts = np.column_stack(np.unravel_index(flat, mask.shape)) * np.asarray(spacing, float)
    tree = cKDTree(pts, balanced_tree=False, compact_nodes=False)
    return tree.query(np.asarray(coords) * np.asarray(spacing, float), workers=-1)[0]


def _radius_shells(mask, coords, spacing, reach):
    """Nearest background by searching offsets in order of increasing distance.

    Exact: all offsets at the same physical distance form one shell, and a
    point is resolved at the first shell that holds a background voxel.
    Cost grows with r**3 per point, so points with no background within
    ``reach`` voxels are returned as NaN (the KD-tree finishes them).
    """
    sp = np.asarray(spacing, float)
    limit = reach * sp.min()
    half = np.ceil(limit / sp).astype(int)
    grids = np.meshgrid(*[np.arange(-h, h + 1) for h in half], indexing="ij")
    offs = np.stack([g.ravel() for g in grids], axis=1)
    dist = np.linalg.norm(offs * sp, axis=1)
    keep = (dist > 0) & (dist <= limit)
    offs, dist = offs[keep], dist[keep]
    order = np.argsort(dist, kind="stable")
    offs, dist = offs[order], dist[order]
    key = np.round(dist, 9)
    shell_start = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    shell_end = np.r_[shell_start[1:], len(dist)]
    # Outside the array is not background (as for the Euclidean distance transform).
    padded = np.pad(mask, [(h, h) for h in half], constant_values=True).ravel()
    pshape = np.asarray(mask.shape) + 2 * half
    strides = c_strides(pshape)
    lin = (np.asarray(coords, np.int64) + half) @ strides
    off_lin = offs.astype(np.int64) @ strides
    result = np.full(len(lin), np.nan)
    todo = np.arange(len(lin))
    for a, b in zip(shell_start, shell_end):
        hit = ~padded[lin[todo, None] + off_lin[None, a:b]]
        found = hit.any(axis=1)
        result[todo[found]] = dist[a]
        todo = todo[~found]
        if len(todo) == 0:
            break
    return result


def centreline_radius(mask, coords, spacing, method="shells", reach=12):
    """Distance from voxels ``coords`` to the nearest background voxel centre.

    Equal to ``scipy.ndimage.distance_transform_edt(mask, sampling=spacing)``
    at those voxels (the array edge is not background), without computing
    the distance transform of the whole volume.

    Parameters
    ----------
    mask : ndarray of bool
    coords : (n, d) int array
    spacing : tuple of float
    method : {"shells", "kdtree", "edt"}
        ``"shells"`` searches neighbour offsets in order of distance up to
        ``reach`` voxels, then a KD-tree for the few thicker points;
        ``"kdtree"`` queries a KD-tree of the background voxels touching the
        object (the nearest background voxel always touches the object);
        ``"edt"`` computes the full distance transform (reference).
    reach : int
        Search radius of ``"shells"``, in voxels of the finest axis.

    Returns
    -------
    (n,) float array, in the units of ``spacing``.
    """
    coords = np.asarray(coords)
    if len(coords) == 0:
        return np.zeros(0)
    if method == "edt":
        dist = ndi.distance_transform_edt(mask, sampling=spacing)
        return dist[tuple(coords.T)]
    if method == "kdtree":
        return _radius_kdtree(mask, coords, spacing)
    result = _radius_shells(mask, coords, spacing, reach)
    rest = np.isnan(result)
    if rest.any():
        result[rest] = _radius_kdtree(mask, coords[rest], spacing)
    return result
