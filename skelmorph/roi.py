"""Regions of interest: the part of an image that is measured.

A region of interest (ROI) is a boolean mask of the image's shape.  It comes
from a file (:func:`load_roi`) or is found from the image (:func:`auto_roi`):

* a grey image (a photograph or a CT volume) gives its *field of view*: the
  voxels brighter than the dark surround (air around a sample, the black
  frame of a fundus camera), found as the border-connected part of the
  darkest class of a three-class multi-Otsu threshold (Liao, Chen & Chung
  2001, J Inf Sci Eng 17:713), with enclosed holes filled;
* a binary (already segmented) image gives the *filled outline* of the
  sample: the convex hull of the structure, slice by slice along the first
  axis in 3D (a core or cast scanned along z).  A concave outline (a lobed
  leaf, a curved cast) needs an ROI file.

All volume measures use the ROI as the reference volume (TV); the skeleton
is clipped to it.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from .errors import InputError

__all__ = ["load_roi", "auto_roi", "check_roi", "roi_box", "field_of_view", "filled_outline",
           "border_mask"]

# A field of view is "found" only when the dark surround holds at least this
# share of the image border; otherwise the image has no background to cut.
_MIN_BORDER_SHARE = 0.5


def border_mask(shape):
    """True on the voxels of the array's faces."""
    edge = np.zeros(shape, bool)
    for axis in range(len(shape)):
        index = [slice(None)] * len(shape)
        for end in (0, -1):
            index[axis] = end
            edge[tuple(index)] = True
    return edge


def load_roi(roi, shape):
    """A region of interest from a file path or an array, checked against ``shape``.

    Any non-zero value is inside.  Raises :class:`InputError` when the shape
    differs from the image's or the region is empty.
    """
    if not isinstance(roi, np.ndarray):
        from .io import read_image
        roi = read_image(roi).array
    roi = np.asarray(roi)
    if roi.ndim == len(shape) + 1 and roi.shape[-1] in (3, 4) and roi.shape[:-1] == tuple(shape):
        roi = roi[..., :3].max(axis=-1)  # a colour picture of a mask
    if roi.shape != tuple(shape):
        raise InputError(f"the ROI has shape {roi.shape} but the image has {tuple(shape)}; "
                         "they must match")
    if roi.dtype.kind == "f" and np.isnan(roi).any():
        raise InputError("the ROI holds NaN values")
    roi = roi != 0
    if not roi.any():
        raise InputError("the ROI is empty (no non-zero voxels)")
    return roi


def field_of_view(image, spacing=None, sigma=2.0, margin=None):
    """The illuminated field of view of a photograph, or the sample of a CT volume.

    Parameters
    ----------
    image : ndarray (2D or 3D grey)
    spacing : sequence of float, optional
    sigma : float
        Smoothing before the threshold, in voxels.
    margin : float, optional
        The field is shrunk by this many voxels, so that the rim of a
        photograph's aperture is not taken for structure.  Default 2 voxels
        in 2D (photographs), 0 in 3D (the sample's own edge is kept).

    Returns
    -------
    roi : bool array, or None when the image has no dark surround (less than
        half of its border is background).
    """
    from skimage.filters import threshold_multiotsu

    image = np.asarray(image, np.float32)
    smooth = ndi.gaussian_filter(image, sigma) if sigma else image
    sample = smooth.ravel()[:: max(1, smooth.size // 2_000_000)]  # enough for a histogram
    if np.ptp(sample) == 0:
        return None
    try:
        low = float(threshold_multiotsu(sample, classes=3)[0])
    except ValueError:  # fewer than three grey levels
        from skimage.filters import threshold_otsu
        low = float(threshold_otsu(sample))
    dark = smooth <= low
    labels, _ = ndi.label(dark)
    edge = border_mask(image.shape)
    outside_labels = np.unique(labels[edge & dark])
    outside = np.isin(labels, outside_labels[outside_labels > 0])
    if np.count_nonzero(outside[edge]) < _MIN_BORDER_SHARE * np.count_nonzero(edge):
        return None
    inside = ndi.binary_fill_holes(~outside)
    labels, n = ndi.label(inside)
    if n == 0:
        return None
    if n > 1:
        sizes = np.bincount(labels.ravel())
        sizes[0] = 0
        inside = labels == int(np.argmax(sizes))
    if margin is None:
        margin = 2.0 if image.ndim == 2 else 0.0
    if margin:
        spacing = np.ones(image.ndim) if spacing is None else np.asarray(spacing, float)
        depth = ndi.distance_transform_edt(inside, sampling=spacing / spacing.min())
        inside = depth > margin
    return inside if inside.any() else None


def filled_outline(mask):
    """Convex hull of a segmented structure, slice by slice along axis 0 in 3D.

    A slice without structure that lies between slices with structure (the
    space between plates, say) gets the overlap of the nearest hulls above
    and below it.
    """
    from skimage.morphology import convex_hull_image

    mask = np.asarray(mask, bool)
    if mask.ndim == 2:
        return convex_hull_image(mask) if mask.any() else mask.copy()
    out = np.zeros_like(mask)
    full = np.flatnonzero(mask.any(axis=(1, 2)))
    for z in full:
        out[z] = convex_hull_image(mask[z])
    for below, above in zip(full[:-1], full[1:]):
        if above > below + 1:
            out[below + 1:above] = out[below] & out[above]
    return out


def auto_roi(image, mask=None, spacing=None):
    """Find the region of interest of an image.

    Parameters
    ----------
    image : ndarray
        The image as read (grey, or binary when already segmented).
    mask : bool array, optional
        Its segmentation; default ``image`` itself (binary images).

    Returns
    -------
    roi : bool array or None
        None when the image has no background to separate (with ``how``
        saying so); the caller then measures the whole image.
    how : str
        ``'field of view'``, ``'filled outline'`` or ``'none found'``.
    """
    from .segment import is_binary

    if is_binary(image):
        return filled_outline(image if mask is None else mask), "filled outline"
    roi = field_of_view(image, spacing)
    return (roi, "field of view") if roi is not None else (None, "none found")


def check_roi(roi, mask):
    """Refuse an ROI that holds none of the structure."""
    if not np.any(mask & roi):
        raise InputError("the ROI holds none of the segmented structure; check the ROI "
                         "file or the threshold (--dark)")
    return roi


def roi_box(roi, pad=1):
    """Bounding box of the ROI as a tuple of slices, grown by ``pad`` voxels."""
    box = ndi.find_objects(np.asarray(roi, np.uint8))[0]
    return tuple(slice(max(0, s.start - pad), min(n, s.stop + pad))
                 for s, n in zip(box, roi.shape))
