"""From an image to a clean binary mask.

Binary input is recognised and kept; grey input is thresholded (Otsu's method
by default) and cleaned: small specks are removed and small enclosed holes are
filled.  Sizes are given in physical units (area in 2D, volume in 3D).
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from .errors import InputError
from .io import check_image_array, validate_spacing

__all__ = ["is_binary", "as_bool_mask", "to_mask", "check_mask", "remove_specks", "fill_holes",
           "count_cavities"]

# Default cleaning for grey input, in voxels: a speck or hole of at most 3**ndim
# voxels (one 3x3(x3) block) is noise at any sensible resolution.
_DEFAULT_CLEAN_VOXELS = {2: 9, 3: 27}


def is_binary(array):
    """True when ``array`` is boolean or holds at most two distinct values."""
    array = np.asarray(array)
    if array.dtype == bool:
        return True
    lo, hi = array.min(), array.max()
    if lo == hi:
        return True
    return bool(np.all((array == lo) | (array == hi)))


def as_bool_mask(binary):
    """Boolean mask of a binary array: the larger of its two values is the
    structure; a constant array is all structure unless it is zero."""
    binary = np.asarray(binary)
    if binary.dtype == bool:
        return binary
    lo, hi = binary.min(), binary.max()
    if lo == hi:
        return np.full(binary.shape, bool(hi != 0))
    return binary == hi


def check_mask(mask):
    """Raise :class:`InputError` if ``mask`` has no foreground or no background."""
    n = int(np.count_nonzero(mask))
    if n == 0:
        raise InputError("the mask is empty (no foreground voxels); check the threshold "
                         "or whether the structure is dark on a bright background (--dark)")
    if n == mask.size:
        raise InputError("the mask is all foreground (no background voxels): nothing to "
                         "skeletonize; check the threshold or crop to the structure")
    return mask


def _voxel_count(size, spacing):
    return int(np.floor(size / float(np.prod(spacing))))


def remove_specks(mask, max_voxels, connectivity=None):
    """Remove connected foreground components of at most ``max_voxels`` voxels.

    Components use full (8/26) connectivity unless ``connectivity`` is given.
    """
    if max_voxels < 1:
        return mask
    labels, n = ndi.label(mask, structure=ndi.generate_binary_structure(
        mask.ndim, connectivity or mask.ndim))
    if n == 0:
        return mask
    sizes = np.bincount(labels.ravel())
    small = sizes <= max_voxels
    small[0] = False
    return mask & ~small[labels]


def _enclosed_background(mask):
    """Face-connected background components and which of them are enclosed.

    Background uses face (4/6) connectivity, the complement of the 8/26
    connectivity of the foreground; a component touching the array edge is
    not enclosed.

    Returns
    -------
    labels : int array, shape of ``mask`` (0 = foreground)
    enclosed : bool array of length n_components + 1 (entry 0 is False)
    """
    labels, n = ndi.label(~mask)
    enclosed = np.ones(n + 1, bool)
    enclosed[0] = False
    for axis in range(mask.ndim):  # one slab per array face
        for index in (0, -1):
            enclosed[np.unique(np.take(labels, index, axis=axis))] = False
    return labels, enclosed


def count_cavities(mask):
    """Number of enclosed background components (cavities in 3D, holes in 2D)."""
    return int(np.count_nonzero(_enclosed_background(mask)[1]))


def fill_holes(mask, max_voxels):
    """Fill enclosed background components of at most ``max_voxels`` voxels.

    ``max_voxels=np.inf`` fills every enclosed cavity.  See
    :func:`count_cavities` for the connectivity used.
    """
    if max_voxels < 1:
        return mask
    labels, enclosed = _enclosed_background(mask)
    if len(enclosed) == 1:
        return mask
    sizes = np.bincount(labels.ravel(), minlength=len(enclosed)).astype(float)
    return mask | (enclosed & (sizes <= max_voxels))[labels]


def to_mask(image, spacing=None, *, threshold=None, dark=False,
            min_object_size=None, max_hole_size=None):
    """Turn a binary or grey image into a clean boolean mask.

    Parameters
    ----------
    image : ndarray
        2D or 3D image.
    spacing : sequence of float, optional
        Voxel size; used to convert the physical sizes below.  Default 1.
    threshold : float, optional
        Grey level separating structure from background.  Default: Otsu's
        method (Otsu 1979, IEEE Trans Syst Man Cybern 9:62) via scikit-image.
    dark : bool
        The structure is darker than the background (e.g. vessels in a fundus
        photograph).
    min_object_size : float, optional
        Foreground components with at most this physical size (area in 2D,
        volume in 3D, in unit**ndim) are removed.  Default for grey input: the
        size of 3**ndim voxels; binary input is not cleaned unless asked.
    max_hole_size : float, optional
        Enclosed background components with at most this physical size are
        filled.  Same default as ``min_object_size``; ``np.inf`` fills all
        enclosed cavities.

    Returns
    -------
    mask : ndarray of bool

    Raises
    ------
    InputError
        NaN values, wrong dimensionality, or an empty / all-foreground result.
    """
    image = check_image_array(image)
    spacing = validate_spacing(1.0 if spacing is None else spacing, image.ndim)
    binary = is_binary(image)
    if binary:
        mask = as_bool_mask(image)
        mask = ~mask if dark else mask.copy()
    else:
        if threshold is None:
            from skimage.filters import threshold_otsu
            threshold = float(threshold_otsu(np.asarray(image)))
        mask = image < threshold if dark else image > threshold
    default = _DEFAULT_CLEAN_VOXELS[image.ndim]
    speck = (_voxel_count(min_object_size, spacing) if min_object_size is not None
             else (0 if binary else default))
    hole = (np.inf if max_hole_size is not None and np.isinf(max_hole_size)
            else _voxel_count(max_hole_size, spacing) if max_hole_size is not None
            else (0 if binary else default))
    mask = np.asarray(mask, dtype=bool)
    if speck:
        mask = remove_specks(mask, speck)
    if hole:
        mask = fill_holes(mask, hole)
    return check_mask(mask)
