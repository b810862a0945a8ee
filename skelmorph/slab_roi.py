"""A region of interest from a file, for a scan analysed in slabs.

The analysis in memory (:func:`skelmorph.pipeline.prepare_mask`) crops the
image to the ROI's bounding box (grown by one voxel), takes Otsu's threshold
from the values inside the ROI, clips the mask to the ROI, removes specks,
fills holes and clips again.  Here the same happens plane range by plane
range: the ROI file is read as a :class:`~skelmorph.volume.Volume` too, its
box and voxel count come from one streamed pass, and the scan and the ROI
are read through a crop to that box, so the graph is built in the same box
as in memory (and moved back to image coordinates the same way).

The bone set measures in the ROI's tight box (no margin), as
:func:`skelmorph.measure.bone.bone_measures` does in memory.  An automatic
ROI (``--roi auto``) needs the whole image (its field of view is a
border-connected component with its holes filled) and is not available in
slabs.
"""

from __future__ import annotations

import numpy as np

from .errors import InputError
from .volume import Volume

__all__ = ["CroppedVolume", "RoiClippedVolume", "roi_extent", "open_roi"]


class CroppedVolume(Volume):
    """Box ``[(z0, z1), (y0, y1), (x0, x1)]`` of a volume, read on demand."""

    def __init__(self, base, box):
        self.base = base
        self.box = [(int(a), int(b)) for a, b in box]
        (z0, z1), (y0, y1), (x0, x1) = self.box
        super().__init__((z1 - z0, y1 - y0, x1 - x0), base.dtype, base.spacing, base.unit,
                         f"{base.source} [box {self.box}]")
        self.kind = base.kind

    def planes(self, start, stop):
        (z0, _), (y0, y1), (x0, x1) = self.box
        return np.ascontiguousarray(self.base.planes(z0 + start, z0 + stop)[:, y0:y1, x0:x1])


class RoiClippedVolume(Volume):
    """Mask planes of ``base`` segmented by ``seg`` and clipped to the ROI
    (1 inside the structure and the ROI, else 0)."""

    def __init__(self, base, seg, roi):
        super().__init__(base.shape, np.uint8, base.spacing, base.unit,
                         f"{base.source} (mask {seg.key()} clipped to {roi.source})")
        self.base, self.seg, self.roi = base, seg, roi
        self.kind = f"{base.kind}, clipped to the ROI"

    def planes(self, start, stop):
        mask = self.seg(self.base.planes(start, stop))
        mask &= self.roi.planes(start, stop) != 0
        return mask.view(np.uint8)


def roi_extent(roi, shape, slab_planes=32, pad=1):
    """Voxel count and bounding box (grown by ``pad``, within the image) of an
    ROI volume, in one streamed pass (``[(start, stop)]`` per axis).

    Raises :class:`InputError` when its shape differs from the image's, it
    holds NaN, or it is empty (as :func:`skelmorph.roi.load_roi`).
    """
    if tuple(roi.shape) != tuple(shape):
        raise InputError(f"the ROI has shape {tuple(roi.shape)} but the image has "
                         f"{tuple(shape)}; they must match")
    nz = roi.shape[0]
    count = 0
    planes = np.zeros(nz, bool)
    rows = np.zeros(roi.shape[1], bool)
    cols = np.zeros(roi.shape[2], bool)
    for a in range(0, nz, slab_planes):
        part = roi.planes(a, min(a + slab_planes, nz))
        if part.dtype.kind == "f" and np.isnan(part).any():
            raise InputError("the ROI holds NaN values")
        inside = part != 0
        count += int(np.count_nonzero(inside))
        planes[a:a + len(part)] = inside.any(axis=(1, 2))
        rows |= inside.any(axis=(0, 2))
        cols |= inside.any(axis=(0, 1))
    if count == 0:
        raise InputError("the ROI is empty (no non-zero voxels)")
    box = []
    for hit, n in zip((planes, rows, cols), shape):
        idx = np.flatnonzero(hit)
        box.append((max(0, int(idx[0]) - pad), min(int(n), int(idx[-1]) + 1 + pad)))
    return count, box


def open_roi(path, scan, smooth=None):
    """The ROI file at ``path`` for ``scan`` (a volume), read in slabs.

    Returns
    -------
    roi : CroppedVolume
        The ROI read through the crop to ``box``.
    count : int
        Its voxels.
    tight : list of (start, stop)
        Its bounding box.
    box : list of (start, stop)
        The box the scan is analysed in: ``tight`` with the margin that
        :func:`skelmorph.pipeline.prepare_mask` gives it in memory (1 voxel,
        or the smoothing filter's reach), within the image.
    """
    from .volume import open_volume
    roi = open_volume(path, scan.spacing, scan.unit)
    count, tight = roi_extent(roi, scan.shape, pad=0)
    pad = 1
    if smooth:  # as in memory: the filters see past the ROI's edge
        widest = max(4 * min(scan.spacing), float(smooth))
        pad = int(np.ceil(3 * widest / min(scan.spacing))) + 1
    box = [(max(0, a - pad), min(int(n), b + pad)) for (a, b), n in zip(tight, scan.shape)]
    return CroppedVolume(roi, box), count, tight, box
