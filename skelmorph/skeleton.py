"""Thinning a mask to one-voxel-wide centrelines.

Thinning itself is scikit-image's: Zhang & Suen (1984, Commun ACM 27:236) in
2D and Lee, Kashyap & Chu (1994, CVGIP: Graph Models Image Process 56:462) in
3D.  Both work on the cubic grid, so masks with strongly anisotropic voxels
are first resampled to isotropic voxels (the finest axis), as recommended for
skeleton geometry; lengths are then measured in physical units either way.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import ndimage as ndi

from .errors import InputError
from .io import estimate_memory, validate_spacing

__all__ = ["skeletonize", "resample_isotropic", "ANISOTROPY_LIMIT"]

#: Largest ratio of voxel sizes thinned as is when ``isotropic="auto"``.
ANISOTROPY_LIMIT = 1.2


def resample_isotropic(mask, spacing):
    """Resample a mask to cubic voxels of the finest spacing.

    The mask is interpolated linearly and thresholded at 0.5, which keeps
    the object's boundary in place to within a voxel.

    Returns
    -------
    mask : ndarray of bool
    spacing : tuple of float
    """
    spacing = validate_spacing(spacing, mask.ndim)
    target = min(spacing)
    zoom = np.array(spacing) / target
    new_shape = np.round(np.array(mask.shape) * zoom).astype(int)
    need = estimate_memory(new_shape)
    if need > 8 * 2**30:
        warnings.warn(f"resampling to isotropic voxels makes a {tuple(new_shape)} volume "
                      f"(about {need / 2**30:.0f} GiB of working memory)", stacklevel=2)
    out = ndi.zoom(mask.astype(np.float32), zoom, order=1, grid_mode=True, mode="grid-constant") > 0.5
    return out, (target,) * mask.ndim


def skeletonize(mask, method=None):
    """One-voxel-wide centrelines of a 2D or 3D mask (scikit-image thinning).

    Parameters
    ----------
    mask : ndarray of bool
    method : {None, "zhang", "lee"}
        ``None`` picks Zhang-Suen in 2D and Lee in 3D.

    Returns
    -------
    ndarray of bool, same shape
    """
    from skimage.morphology import skeletonize as _sk

    mask = np.asarray(mask, dtype=bool)
    if mask.ndim not in (2, 3):
        raise InputError(f"can only skeletonize 2D or 3D masks, got {mask.ndim}D")
    return np.asarray(_sk(mask, method=method), dtype=bool)
