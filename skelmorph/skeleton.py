"""Thinning a mask to one-voxel-wide centrelines.

The default is skelmorph's own distance-ordered, topology-preserving
thinning (:mod:`skelmorph.thinning`, after Pudney 1998), which works on the
anisotropic voxel grid as it is.  scikit-image's thinning stays available
for comparison: Zhang & Suen (1984, Commun ACM 27:236) in 2D and Lee,
Kashyap & Chu (1994, CVGIP: Graph Models Image Process 56:462) in 3D; it
assumes cubic voxels, so :func:`resample_isotropic` can be asked for with it.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import ndimage as ndi

from .errors import InputError
from .io import estimate_memory, validate_spacing

__all__ = ["skeletonize", "resample_isotropic", "THINNING_METHODS"]

#: Accepted ``method`` names: ours, and scikit-image's two.
THINNING_METHODS = ("ordered", "lee", "zhang")


def resample_isotropic(mask, spacing):
    """Resample a mask to cubic voxels of the finest spacing.

    The mask is interpolated linearly and thresholded at 0.5, which keeps
    the object's boundary in place to within a voxel.  Resampling can cut
    diagonal links between voxels (a change of topology); it is offered only
    for comparisons with thinnings that assume cubic voxels.

    Returns
    -------
    mask : ndarray of bool
    spacing : tuple of float
    """
    spacing = validate_spacing(spacing, mask.ndim)
    target = min(spacing)
    zoom = np.array(spacing) / target
    new_shape = np.round(np.array(mask.shape) * zoom).astype(int)
    from .io import check_declared_size
    check_declared_size(new_shape, np.float32, "resampling to cubic voxels")
    need = estimate_memory(new_shape)
    if need > 8 * 2**30:
        warnings.warn(f"resampling to isotropic voxels makes a {tuple(new_shape)} volume "
                      f"(about {need / 2**30:.0f} GiB of working memory)", stacklevel=2)
    out = ndi.zoom(mask.astype(np.float32), zoom, order=1, grid_mode=True, mode="grid-constant") > 0.5
    return out, (target,) * mask.ndim


def skeletonize(mask, spacing=None, method="ordered"):
    """One-voxel-wide centrelines of a 2D or 3D mask.

    Parameters
    ----------
    mask : ndarray of bool
    spacing : sequence of float, optional
        Voxel size (``"ordered"`` weighs its distance map with it; the
        scikit-image methods ignore it).
    method : {"ordered", "lee", "zhang", None}
        ``"ordered"`` (default, also for None): distance-ordered homotopic
        thinning on the native grid (:func:`skelmorph.thinning.thin`);
        ``"lee"`` / ``"zhang"``: scikit-image's thinning.

    Returns
    -------
    ndarray of bool, same shape

    Examples
    --------
    >>> import numpy as np
    >>> bar = np.zeros((7, 20), bool); bar[2:5, 2:18] = True
    >>> int(skeletonize(bar).sum()) > 0
    True
    """
    mask = np.asarray(mask, dtype=bool)
    if mask.ndim not in (2, 3):
        raise InputError(f"can only skeletonize 2D or 3D masks, got {mask.ndim}D")
    method = method or "ordered"
    if method not in THINNING_METHODS:
        raise InputError(f"unknown thinning method {method!r}; use one of "
                         f"{', '.join(THINNING_METHODS)}")
    if method == "ordered":
        from .thinning import thin
        return thin(mask, spacing)
    from skimage.morphology import skeletonize as _sk
    return np.asarray(_sk(mask, method=method), dtype=bool)
