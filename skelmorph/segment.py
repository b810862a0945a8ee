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

__all__ = ["is_binary", "as_bool_mask", "to_mask", "segment_image", "enhance_vessels",
           "check_mask", "remove_specks", "fill_holes", "count_cavities"]

#: Said when a filter for grey images is asked of a binary one.
ALREADY_BINARY = ("the image is already binary: --smooth, --enhance and --hysteresis apply to "
                  "grey images only")

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
    check_foreground_count(int(np.count_nonzero(mask)), mask.size)
    return mask


def check_foreground_count(n, total):
    """Raise :class:`InputError` for 0 or ``total`` foreground voxels out of ``total``."""
    if n == 0:
        raise InputError("the mask is empty (no foreground voxels); check the threshold "
                         "or whether the structure is dark on a bright background (--dark)")
    if n == total:
        raise InputError("the mask is all foreground (no background voxels): nothing to "
                         "skeletonize; check the threshold or crop to the structure")


def _voxel_count(size, spacing):
    return int(np.floor(size / float(np.prod(spacing))))


def remove_specks(mask, max_voxels, connectivity=None, keep_faces=(False, False)):
    """Remove connected foreground components of at most ``max_voxels`` voxels.

    Components use full (8/26) connectivity unless ``connectivity`` is given.
    ``keep_faces`` (first, last) keeps the components touching the first or
    last plane of axis 0 (where a slab of a larger volume was cut).
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
    for face, keep in zip((0, -1), keep_faces):
        if keep:
            small[np.unique(labels[face])] = False
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


#: A 3D mask of more voxels than this has its cavities counted slab by slab
#: (labels of one slab at a time: 4 bytes per voxel of the slab, not of the
#: volume).
CAVITY_SLAB_VOXELS = 2 ** 24


def count_cavities(mask):
    """Number of enclosed background components (cavities in 3D, holes in 2D).

    Large 3D masks are labelled slab by slab along axis 0 and the slabs'
    components joined across their faces
    (:func:`skelmorph.chunked.chunked_cavities`; the same count, tested).
    """
    mask = np.asarray(mask)
    if mask.ndim == 3 and mask.size > CAVITY_SLAB_VOXELS:
        from .chunked import chunked_cavities
        from .volume import ArrayVolume
        planes = max(2, CAVITY_SLAB_VOXELS // max(mask.shape[1] * mask.shape[2], 1))
        slabs = [(a, min(a + planes, mask.shape[0])) for a in range(0, mask.shape[0], planes)]
        return chunked_cavities(ArrayVolume(mask, (1.0, 1.0, 1.0), "px"),
                                lambda block: block.astype(bool, copy=False), slabs)
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


ENHANCE_METHODS = ("vessels",)


def _default_scales(spacing):
    """One to four voxels of the finest axis (physical units)."""
    return (min(spacing), 4 * min(spacing))


def _scale_sigmas(scales, spacing):
    """Gaussian scales (physical) -> sigmas in voxels of the finest axis, at
    most six, one voxel apart or more."""
    lo, hi = (float(v) for v in scales)
    if not (np.isfinite(lo) and np.isfinite(hi)) or lo <= 0 or hi < lo:
        raise InputError(f"--scales must be two positive sizes, MIN <= MAX; got {lo:g} {hi:g}")
    step = float(min(spacing))
    lo, hi = lo / step, hi / step
    n = int(min(6, max(1, np.floor(hi - lo) + 1)))
    return np.linspace(lo, hi, n)


def enhance_vessels(image, spacing, scales=None, dark=False):
    """Multi-scale ridge (vesselness) filter: Sato's line filter.

    Sato Y, Nakajima S, Shiraga N, Atsumi H, Yoshida S, Koller T, Gerig G,
    Kikinis R (1998). Three-dimensional multi-scale line filter for
    segmentation and visualization of curvilinear structures in medical
    images. Med Image Anal 2:143-168; scikit-image's ``filters.sato``.

    Parameters
    ----------
    image : ndarray (2D or 3D grey)
    spacing : sequence of float
    scales : (min, max), physical units, optional
        Range of the Gaussian scales; it should span the radii of the
        vessels to keep.  Default one to four voxels of the finest axis.
    dark : bool
        Vessels darker than their surround.

    Returns
    -------
    response : float32 array, >= 0, large on tubes.

    Notes
    -----
    With anisotropic voxels the image is resampled to isotropic voxels of
    the finest axis (linear), filtered, and sampled back.
    """
    from skimage.filters import sato

    spacing = np.asarray(spacing, float)
    sigmas = _scale_sigmas(_default_scales(spacing) if scales is None else scales, spacing)
    image = np.asarray(image, np.float32)
    zoom = spacing / spacing.min()
    if np.allclose(zoom, 1):
        return sato(image, sigmas=sigmas, black_ridges=dark).astype(np.float32)
    from .io import check_declared_size
    fine_shape = np.round(np.array(image.shape) * zoom).astype(int)
    check_declared_size(tuple(fine_shape) + (image.ndim + 1,), np.float32,
                        "vessel enhancement on cubic voxels")  # image + Hessian terms
    fine = ndi.zoom(image, zoom, order=1, grid_mode=True, mode="nearest")
    response = sato(fine, sigmas=sigmas, black_ridges=dark).astype(np.float32)
    coords = np.meshgrid(*[(np.arange(n) + 0.5) * z - 0.5 for n, z in zip(image.shape, zoom)],
                         indexing="ij", sparse=True)
    coords = np.broadcast_arrays(*coords)
    return ndi.map_coordinates(response, coords, order=1, mode="nearest").astype(np.float32)


def _hysteresis_levels(hysteresis, score, high, roi):
    if isinstance(hysteresis, str):
        if hysteresis != "auto":
            raise InputError(f"hysteresis must be 'auto' or two levels, not {hysteresis!r}")
        inside = score[roi] if roi is not None else score
        base = float(np.median(inside))
        return base + 0.5 * (high - base), high
    low, high = (float(v) for v in hysteresis)
    if low > high:
        raise InputError(f"hysteresis levels must be LOW <= HIGH; got {low:g} {high:g}")
    return low, high


#: An integer image with at most this many distinct values (and more than
#: two) is taken for a label map, which is never thresholded unasked.
MAX_LABELS = 32


def _label_values(image):
    """Distinct values of an integer image if there are at most MAX_LABELS, else None."""
    if image.dtype.kind not in "iu":
        return None
    flat = image.ravel()
    if image.dtype.itemsize <= 2:
        counts = np.bincount((flat.astype(np.int64) - int(flat.min())))
        values = np.flatnonzero(counts) + int(flat.min())
    else:
        values = np.unique(flat[:: max(1, flat.size // 1_000_000)])
        if len(values) <= MAX_LABELS:
            values = np.unique(flat)
    return values if len(values) <= MAX_LABELS else None


def segment_image(image, spacing=None, *, threshold=None, dark=False, smooth=None,
                  enhance=None, scales=None, hysteresis=None, roi=None,
                  min_object_size=None, max_hole_size=None, label=None):
    """Turn a binary or grey image into a clean boolean mask, saying what was done.

    Parameters are those of :func:`to_mask`.

    Returns
    -------
    mask : bool array
    steps : list of dict
        Every step that changed the data, in order, with its settings and
        values (for a methods section).
    """
    image = check_image_array(image)
    spacing = validate_spacing(1.0 if spacing is None else spacing, image.ndim)
    if roi is not None:
        roi = np.asarray(roi, bool)
        if roi.shape != image.shape:
            raise InputError(f"the ROI has shape {roi.shape} but the image has {image.shape}; "
                             "they must match")
    steps = []
    if label is not None:
        if image.dtype.kind not in "iub":
            raise InputError(f"--label needs an integer label image; this one is {image.dtype}")
        image = image == label
        if not image.any():
            raise InputError(f"label {label} does not occur in the image")
        steps.append({"step": "label", "value": int(label)})
    binary = is_binary(image)
    if not binary and label is None and threshold is None and enhance is None:
        values = _label_values(image)
        if values is not None:
            shown = ", ".join(str(v) for v in values[:8]) + (", ..." if len(values) > 8 else "")
            raise InputError(f"the image holds {len(values)} integer values ({shown}): it looks "
                             "like a label map; say which label to keep (--label N) or give "
                             "--threshold")
    if binary and (smooth or enhance or hysteresis is not None):
        raise InputError(ALREADY_BINARY)
    if binary:
        mask = as_bool_mask(image)
        mask = ~mask if dark else mask.copy()
        steps.append({"step": "binary input", "structure": "low value" if dark else "high value"})
    else:
        score = np.asarray(image, np.float32)
        if smooth:
            sigma = float(smooth)
            if not np.isfinite(sigma) or sigma < 0:
                raise InputError(f"--smooth must be a positive size, not {smooth!r}")
            score = ndi.gaussian_filter(score, sigma / np.asarray(spacing, float))
            steps.append({"step": "gaussian smoothing", "sigma": sigma})
        bright = not dark
        if enhance is not None:
            if enhance not in ENHANCE_METHODS:
                raise InputError(f"unknown enhancement {enhance!r}; choose from "
                                 f"{', '.join(ENHANCE_METHODS)}")
            score = enhance_vessels(score, spacing, scales, dark=dark)
            sig = _scale_sigmas(_default_scales(spacing) if scales is None else scales,
                                spacing) * min(spacing)
            steps.append({"step": "vessel enhancement",
                          "filter": "Sato multi-scale line filter (scikit-image sato)",
                          "scales": [float(v) for v in sig], "dark_vessels": bool(dark)})
            bright = True  # the response is high on the structure
        inside = score[roi] if roi is not None else score.ravel()
        if threshold is None:
            from skimage.filters import threshold_otsu
            threshold = float(threshold_otsu(inside))
            how = "Otsu" + (" inside the ROI" if roi is not None else "")
        else:
            how = "given"
        if hysteresis is not None:
            from skimage.filters import apply_hysteresis_threshold
            s = score if bright else -score
            low, high = _hysteresis_levels(hysteresis, s, threshold if bright else -threshold,
                                           roi)
            mask = apply_hysteresis_threshold(s, low, high)
            if not bright:
                low, high = -low, -high
            steps.append({"step": "hysteresis threshold", "low": low, "high": high,
                          "high_from": how, "structure": "above" if bright else "below"})
        else:
            mask = score > threshold if bright else score < threshold
            steps.append({"step": "threshold", "value": float(threshold), "method": how,
                          "structure": "above" if bright else "below"})
        fraction = float(np.count_nonzero(mask[roi] if roi is not None else mask)) / max(
            1, inside.size)
        steps[-1]["foreground_fraction"] = fraction
    if roi is not None:
        mask = np.asarray(mask, bool) & roi
        steps.append({"step": "clip to ROI"})
    default = _DEFAULT_CLEAN_VOXELS[image.ndim]
    speck = (_voxel_count(min_object_size, spacing) if min_object_size is not None
             else (0 if binary else default))
    hole = (np.inf if max_hole_size is not None and np.isinf(max_hole_size)
            else _voxel_count(max_hole_size, spacing) if max_hole_size is not None
            else (0 if binary else default))
    mask = np.asarray(mask, dtype=bool)
    voxel = float(np.prod(spacing))
    if speck:
        before = int(np.count_nonzero(mask))
        mask = remove_specks(mask, speck)
        steps.append({"step": "speck removal", "max_size": speck * voxel, "max_voxels": speck,
                      "voxels_removed": before - int(np.count_nonzero(mask))})
    if hole:
        before = int(np.count_nonzero(mask))
        mask = fill_holes(mask, hole)
        if roi is not None:
            mask &= roi
        steps.append({"step": "hole filling",
                      "max_size": float(hole * voxel) if np.isfinite(hole) else "all",
                      "voxels_filled": int(np.count_nonzero(mask)) - before})
    if roi is not None:
        from .roi import check_roi
        check_roi(roi, mask)
    return check_mask(mask), steps


def to_mask(image, spacing=None, *, threshold=None, dark=False,
            min_object_size=None, max_hole_size=None, smooth=None, enhance=None,
            scales=None, hysteresis=None, roi=None, label=None):
    """Turn a binary or grey image into a clean boolean mask.

    Parameters
    ----------
    image : ndarray
        2D or 3D image.
    spacing : sequence of float, optional
        Voxel size; used to convert the physical sizes below.  Default 1.
    threshold : float, optional
        Grey level separating structure from background (of the enhanced
        image with ``enhance``).  Default: Otsu's method (Otsu 1979, IEEE
        Trans Syst Man Cybern 9:62) via scikit-image, on the voxels of the
        ROI when one is given.
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
    smooth : float, optional
        Gaussian smoothing of a grey image before anything else, sigma in
        physical units.
    enhance : {'vessels'}, optional
        Threshold a multi-scale line filter's response instead of the grey
        levels (:func:`enhance_vessels`).
    scales : (min, max), optional
        Scales of the enhancement, physical units.
    hysteresis : 'auto' or (low, high), optional
        Hysteresis thresholding (Canny 1986, IEEE Trans PAMI 8:679): keep
        regions above ``low`` that touch a voxel above ``high``.  ``'auto'``
        takes the threshold as ``high`` and the level halfway from the median
        to it as ``low``.
    roi : bool array, optional
        Region of interest: the threshold is computed inside it and the mask
        is clipped to it.
    label : int, optional
        Keep the voxels of this value of a label image.  An integer image
        with 3 to ``MAX_LABELS`` distinct values is refused without
        ``label``, ``threshold`` or ``enhance``.

    Returns
    -------
    mask : ndarray of bool

    Raises
    ------
    InputError
        NaN values, wrong dimensionality, or an empty / all-foreground result.
    """
    return segment_image(image, spacing, threshold=threshold, dark=dark, smooth=smooth,
                         enhance=enhance, scales=scales, hysteresis=hysteresis, roi=roi,
                         min_object_size=min_object_size, max_hole_size=max_hole_size,
                         label=label)[0]
