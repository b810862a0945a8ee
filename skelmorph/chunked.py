"""Analysing a 3D scan larger than memory in overlapping slabs.

The volume (:mod:`skelmorph.volume`) is cut into slabs of whole planes
along the first axis.  Each slab is read with a *halo* of extra planes on
both sides, segmented, given its exact distance map and thinned exactly as
the whole volume would be (:mod:`skelmorph.thinning`); only the centreline
voxels of its own planes (its *core*) are kept, with their distance to the
background.  The graph is then built once from the kept voxels
(:func:`skelmorph.build.graph_from_voxels`), so no graph is ever stitched
from parts: junctions and loops that a slab face cuts through come out
whole.

Why the slabs equal the whole volume
    Distance map: a core voxel's distance is exact when its nearest
    background voxel lies in the slab, which holds when the halo is deeper
    than the largest distance in the core (checked per slab).
    Thinning: deletions follow the distance order, and within one distance
    bin a fixed sweep order that depends only on positions relative to
    16-plane boundaries (twice the thinning's parallel slab), so slabs start
    on such boundaries.  A voxel's fate depends on what happened near it
    before; with a halo of ``HALO_RADII`` times the largest radius (and at
    least 16 planes) the core is thinned voxel for voxel as in the whole
    volume (tested on foams, thick foams, tori and bifurcations cut through
    junctions and loops).  Each run checks it: every slab also keeps its
    centreline in 16 planes past its core on both sides, which must equal
    the neighbour's core there; a seam that differs is recomputed with twice
    the halo, and one that still differs is reported in the warnings.
Memory
    One slab with its halo takes about ``BYTES_PER_VOXEL`` bytes per voxel
    (mask, distance map, thinning flags, sort order); the memory limit sets
    the slab depth.  The kept centreline (a few percent of the voxels) and
    the graph are held whole.
Resuming
    Every slab's result is a plain ``.npz`` file in a work folder, written
    atomically and named after what determines it; a killed run resumes
    from the slabs it finished.

Segmentation in slabs: binary volumes, label maps (``label``) and
thresholds (given, or Otsu's from a histogram streamed over the slabs),
after an optional Gaussian smoothing (:class:`skelmorph.volume.SmoothedVolume`),
followed by the speck removal and hole filling of the analysis in memory
(:class:`CleanedVolume`); each reads the extra planes it needs, so the
slab's mask equals the whole volume's.  Vessel enhancement, hysteresis,
filling every hole and regions of interest are not available in slabs yet.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InputError
from .io import _available_memory, atomic_path
from .volume import Volume

__all__ = ["parse_memory", "memory_limit_bytes", "plan_slabs", "Segmenter", "survey",
           "smoothed_volume", "cleaned_volume", "chunked_skeleton",
           "chunked_cavities", "chunked_branch_volumes", "chunked_graph",
           "chunked_bone_measures", "slab_volume", "check_slab_options", "LazyMask",
           "SkeletonVolume",
           "SLAB_ALIGN", "BYTES_PER_VOXEL"]

#: Slabs start on multiples of this many planes (twice the thinning's slab),
#: so that the thinning's sweep order is the same in a slab as in the whole.
SLAB_ALIGN = 16
#: Working memory of one slab per voxel (input, mask, float32 distances,
#: thinning flags and sort order): one slab task on a 512^2 foam measured 8-9
#: bytes/voxel (VmHWM of a child process); 16 leaves room for denser scans.
BYTES_PER_VOXEL = 16
#: Halo depth in largest radii (see the module docstring).
HALO_RADII = 4
#: First halo tried, planes (enough for radii up to 7 voxels).
DEFAULT_HALO = 32
#: Planes past the core on each side compared with the neighbour's core.
SEAM_PLANES = 16
#: Default memory limit: this fraction of the memory available at start.
DEFAULT_MEMORY_FRACTION = 0.5

_UNITS = {"": 1, "b": 1, "k": 1e3, "kb": 1e3, "m": 1e6, "mb": 1e6, "g": 1e9, "gb": 1e9,
          "t": 1e12, "tb": 1e12, "kib": 2**10, "mib": 2**20, "gib": 2**30, "tib": 2**40}


def parse_memory(value):
    """Bytes from ``8GB``, ``40MB``, ``1.5GiB`` or a number of bytes.

    >>> parse_memory("8GB"), parse_memory("40 MiB"), parse_memory(1e6)
    (8000000000, 41943040, 1000000)
    """
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        number, unit = float(value), ""
    else:
        m = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([A-Za-z]*)\s*", str(value))
        if not m or m.group(2).lower() not in _UNITS:
            raise InputError(f"memory limit {value!r} is not a size; write e.g. 8GB, 500MB or "
                             "1.5GiB")
        number, unit = float(m.group(1)), m.group(2).lower()
    size = number * _UNITS[unit]
    if not math.isfinite(size) or size <= 0:
        raise InputError(f"memory limit {value!r} must be a positive size")
    return int(size)


def memory_limit_bytes(value=None):
    """The memory limit in bytes: ``value`` parsed, or by default half the
    memory available now (all of it is never ours to take)."""
    if value is not None:
        return parse_memory(value)
    have = _available_memory()
    return int(DEFAULT_MEMORY_FRACTION * have) if have else 8 * 10**9


def _align_up(n):
    return int(math.ceil(n / SLAB_ALIGN)) * SLAB_ALIGN


def plan_slabs(shape, memory_limit, halo, bytes_per_voxel=None):
    """Slab cores ``[(a, b), ...]`` along the first axis for a memory limit.

    Parameters
    ----------
    shape : tuple of 3 ints
    memory_limit : int, bytes
    halo : int, planes on each side (a multiple of ``SLAB_ALIGN``)
    bytes_per_voxel : float, optional
        Working memory of the slab's task (default ``BYTES_PER_VOXEL``).

    Raises
    ------
    InputError
        When not even one aligned core of ``SLAB_ALIGN`` planes with its halo
        fits in the limit.
    """
    nz = int(shape[0])
    plane = float(shape[1]) * float(shape[2]) * (bytes_per_voxel or BYTES_PER_VOXEL)
    fit = int(memory_limit // plane)  # planes that fit
    core = (fit - 2 * halo) // SLAB_ALIGN * SLAB_ALIGN
    if core < SLAB_ALIGN and fit < nz:
        need = (2 * halo + SLAB_ALIGN) * plane
        raise InputError(f"a volume of {tuple(shape)} voxels needs at least {need / 1e9:.2g} GB "
                         f"per slab ({SLAB_ALIGN} planes and a halo of {halo} on each side); "
                         f"the memory limit is {memory_limit / 1e9:.2g} GB")
    if core >= nz or fit >= nz:
        return [(0, nz)]
    return [(a, min(a + core, nz)) for a in range(0, nz, core)]


#: Local workers are added only when they cut the planes read per worker
#: by this factor (their slabs are thinner, so their halos are more of the work).
PARALLEL_GAIN = 1.3


def fitting_workers(shape, memory_limit, halo, workers, scheduler=None, bytes_per_voxel=None):
    """How many slabs run at once here, and the memory each may use.

    Local workers share ``memory_limit``: up to ``workers`` of them, as many
    as cut the planes each one reads (its cores and their halos) by
    ``PARALLEL_GAIN`` or more.  Tasks on a Dask cluster run on other
    machines and each has the whole limit.

    Returns
    -------
    workers : int
    task_limit : float, bytes

    Raises
    ------
    InputError
        When not even one slab with its halo fits in the limit.
    """
    if scheduler is not None:
        return 1, float(memory_limit)
    # Planes read (cores plus halos) per worker: a smaller share means more
    # slabs and more halo planes, and more slab faces to check.
    best = (float(len(plan_slabs(shape, memory_limit, halo, bytes_per_voxel))
                  * 2 * halo + shape[0]), 1)  # raises when nothing fits
    for n in range(2, max(1, int(workers)) + 1):
        try:
            slabs = plan_slabs(shape, memory_limit / n, halo, bytes_per_voxel)
        except InputError:
            break
        cost = (shape[0] + len(slabs) * 2 * halo) / min(n, len(slabs))
        if cost * PARALLEL_GAIN < best[0]:
            best = (cost, n)
    return best[1], memory_limit / best[1]


# ----------------------------------------------------------------------------- segmentation

@dataclass
class Segmenter:
    """Per-voxel segmentation of planes: ``mode`` is 'binary' (values above
    ``value`` are structure), 'label' (voxels equal to ``value``) or
    'threshold' (above ``value``, below with ``dark``)."""

    mode: str
    value: float
    dark: bool = False
    steps: list = field(default_factory=list)

    def __call__(self, planes):
        if self.mode == "label":
            mask = planes == self.value
        elif self.mode == "binary":
            mask = planes > self.value
            if self.dark:
                mask = ~mask
        else:
            mask = planes < self.value if self.dark else planes > self.value
        return mask

    def key(self):
        return [self.mode, float(self.value), bool(self.dark)]


def smoothed_volume(volume, sigma, slab_planes=32, label=None):
    """``volume`` through a Gaussian of ``sigma`` (physical units), for grey
    scans analysed in slabs (:class:`skelmorph.volume.SmoothedVolume`).

    As in memory, a binary image (or a label, which is one) is refused:
    planes are read until one holds a third value (at once for a grey scan)."""
    from .segment import ALREADY_BINARY
    from .volume import SmoothedVolume
    if label is not None:
        raise InputError(ALREADY_BINARY)
    try:
        sigma = float(sigma)
    except (TypeError, ValueError):
        sigma = float("nan")
    if not np.isfinite(sigma) or sigma <= 0:
        raise InputError(f"--smooth must be a positive size, not {sigma!r}")
    values = set()
    for a in range(0, volume.shape[0], slab_planes):
        s = volume.planes(a, min(a + slab_planes, volume.shape[0]))
        for sample in (s[:, ::7, ::7], s):  # a sparse look first: grey shows at once
            values.update(np.unique(sample)[:3].tolist())
            if len(values) > 2:
                break
        if len(values) > 2:
            return SmoothedVolume(volume, sigma)
    raise InputError(ALREADY_BINARY)


#: Deepest reach (planes on each side) of the clean-ups in slabs.
MAX_CLEAN_REACH = 256


class CleanedVolume(Volume):
    """Mask planes of ``base`` segmented by ``seg``, with specks of at most
    ``speck`` voxels removed and enclosed holes of at most ``hole`` voxels
    filled, equal to the clean-ups of the whole volume
    (:func:`skelmorph.segment.remove_specks`, :func:`~skelmorph.segment.fill_holes`).

    A component of n voxels spans at most n planes.  So each request reads
    ``speck + hole`` extra planes on each side; a component touching a face
    where the read was cut is left as it is (it may go on beyond), and what
    is then exact shrinks by ``speck`` planes after the speck removal and by
    ``hole`` planes after the hole filling, which leaves the planes asked for.
    """

    def __init__(self, base, seg, speck, hole):
        super().__init__(base.shape, np.uint8, base.spacing, base.unit,
                         f"{base.source} (mask {seg.key()}, specks <= {speck} voxels, "
                         f"holes <= {hole} voxels)")
        self.base, self.seg, self.speck, self.hole = base, seg, int(speck), int(hole)
        self.kind = f"{base.kind}, cleaned"

    def planes(self, start, stop):
        from .segment import fill_holes, remove_specks
        nz = self.shape[0]
        reach = self.speck + self.hole
        lo, hi = max(0, start - reach), min(nz, stop + reach)
        mask = self.seg(self.base.planes(lo, hi))
        if self.speck:
            mask = remove_specks(mask, self.speck, keep_faces=(lo > 0, hi < nz))
            a = lo + (self.speck if lo > 0 else 0)
            b = hi - (self.speck if hi < nz else 0)
            mask, lo, hi = mask[a - lo:b - lo], a, b
        if self.hole:  # a hole touching a cut face is not enclosed there
            mask = fill_holes(mask, self.hole)
        return mask[start - lo:stop - lo].astype(np.uint8)


def cleaned_volume(volume, seg, spacing, min_object_size=None, max_hole_size=None, grey=None):
    """The volume seen as a cleaned mask, as :func:`skelmorph.segment.segment_image`
    cleans in memory (grey input: specks and holes of at most 3^3 voxels by
    default; binary input and labels: none), and the steps for the record.

    Returns ``(volume, seg)``: the cleaned volume and the segmenter of its
    0/1 planes (with the steps for the record), or both unchanged when
    there is nothing to clean.  ``grey`` says whether the scan was grey
    (default: from ``seg``; a scan clipped to an ROI is binary by then).
    """
    from .segment import _DEFAULT_CLEAN_VOXELS, _voxel_count
    grey = seg.mode not in ("binary", "label") if grey is None else grey
    default = _DEFAULT_CLEAN_VOXELS[3] if grey else 0
    if max_hole_size is not None and np.isinf(max_hole_size):
        raise InputError("this scan is analysed in slabs, where holes can be filled only up "
                         "to a size; give --max-hole-size a number, or raise --memory-limit")
    speck = _voxel_count(min_object_size, spacing) if min_object_size is not None else default
    hole = _voxel_count(max_hole_size, spacing) if max_hole_size is not None else default
    if speck + hole > MAX_CLEAN_REACH:
        raise InputError(f"in slabs, specks and holes can reach at most {MAX_CLEAN_REACH} "
                         f"planes together; --min-object-size and --max-hole-size ask for "
                         f"{speck + hole} voxels")
    if not speck and not hole:
        return volume, seg
    voxel = float(np.prod(spacing))
    steps = []
    if speck:
        steps.append({"step": "speck removal", "max_size": speck * voxel, "max_voxels": speck})
    if hole:
        steps.append({"step": "hole filling", "max_size": float(hole * voxel)})
    cleaned = CleanedVolume(volume, seg, speck, hole)
    return cleaned, Segmenter("binary", 0.0, False, list(seg.steps) + steps)


def _histogram_otsu(counts, centres):
    from skimage.filters import threshold_otsu
    return float(threshold_otsu(hist=(counts, centres)))


def survey(volume, *, threshold=None, dark=False, label=None, slab_planes=32, progress=False,
           roi=None):
    """One streamed pass that decides the per-voxel segmentation of a volume.

    Binary volumes need no threshold (the larger value is the structure); a
    label needs none either; a grey volume without ``threshold`` gets
    Otsu's threshold from its histogram, of the voxels inside ``roi`` (a
    volume of the same shape, non-zero inside) when given: 256 bins between
    the extremes, as scikit-image's ``threshold_otsu`` bins the float32
    values in memory (8- and 16-bit data are counted per value in the same
    pass, then put in those bins).
    """
    if label is not None:
        if volume.dtype.kind not in "iub":
            raise InputError(f"--label needs an integer label image; this one is {volume.dtype}")
        return Segmenter("label", label, False, [{"step": "label", "value": int(label)}])
    from .progress import Progress

    nz = volume.shape[0]
    bar = Progress(-(-nz // slab_planes), "survey", enabled=bool(progress))
    lo = hi = None  # extremes of the voxels the histogram counts
    values = set()
    binary = True
    small_int = volume.dtype.kind in "ub" and volume.dtype.itemsize <= 2
    counts = np.zeros(2 ** (8 * volume.dtype.itemsize) if small_int else 0, np.int64)
    for a in range(0, nz, slab_planes):
        s = volume.planes(a, min(a + slab_planes, nz))
        if s.dtype.kind == "f" and not np.isfinite(s).all():
            raise InputError(f"{volume.source}: the image holds NaN or infinite values "
                             f"(planes {a}-{min(a + slab_planes, nz)})")
        smin, smax = s.min(), s.max()
        if binary:
            if smin == smax:
                values.add(smin.item())
            elif np.all((s == smin) | (s == smax)):
                values.update((smin.item(), smax.item()))
            else:
                binary = False
            binary &= len(values) <= 2
        counted = s if roi is None else s[roi.planes(a, a + len(s)) != 0]
        if counted.size:
            cmin, cmax = counted.min(), counted.max()
            lo = cmin if lo is None else min(lo, cmin)
            hi = cmax if hi is None else max(hi, cmax)
        if small_int and threshold is None:
            counts += np.bincount(counted.ravel().view(np.uint8 if s.dtype == bool else s.dtype),
                                  minlength=counts.size)
        bar.update()
    if binary:
        if len(values) == 1:  # one value: no structure (0) or nothing but structure
            from .segment import check_foreground_count
            check_foreground_count(0 if not max(values) else 1, 1)
        return Segmenter("binary", float(min(values)), dark,
                         [{"step": "binary input", "structure": "low value" if dark
                           else "high value"}])
    if threshold is not None:
        return Segmenter("threshold", float(threshold), dark,
                         [{"step": "threshold", "value": float(threshold), "method": "given",
                           "structure": "below" if dark else "above"}])
    if lo is None:
        raise InputError("the ROI is empty (no non-zero voxels)")
    if not small_int:  # a second pass with bins between the extremes
        edges = np.linspace(float(lo), float(hi), 257)
        counts = np.zeros(256, np.int64)
        for a in range(0, nz, slab_planes):
            s = volume.planes(a, min(a + slab_planes, nz))
            counted = s if roi is None else s[roi.planes(a, a + len(s)) != 0]
            counts += np.histogram(counted, bins=edges)[0]
        centres = 0.5 * (edges[1:] + edges[:-1])
    else:  # integer counts put in the 256 bins that the float values fall in, in memory
        values = np.arange(int(lo), int(hi) + 1, dtype=np.float64)
        counts, edges = np.histogram(values, bins=256, range=(float(lo), float(hi)),
                                     weights=counts[int(lo):int(hi) + 1])
        centres = 0.5 * (edges[1:] + edges[:-1])
    t = _histogram_otsu(counts, centres)
    where = " inside the ROI" if roi is not None else ""
    return Segmenter("threshold", t, dark, [{"step": "threshold", "value": t,
                                             "method": f"Otsu{where} (streamed histogram)",
                                             "structure": "below" if dark else "above"}])


# ----------------------------------------------------------------------------- slab work

def _slab_extent(a, b, halo, nz):
    return max(0, a - halo), min(nz, b + halo)


def _task_key(volume, seg, spacing, a, b, halo):
    text = json.dumps([volume.source, list(volume.shape), str(volume.dtype), list(spacing),
                       seg.key(), a, b, halo, SLAB_ALIGN, HALO_RADII])
    return hashlib.sha1(text.encode()).hexdigest()[:16]


def _flat(coords_local, lo, shape):
    """Flat indices in the whole volume of (z, y, x) voxel indices of a slab from ``lo``."""
    z = coords_local[:, 0].astype(np.int64) + lo
    return (z * shape[1] + coords_local[:, 1]) * shape[2] + coords_local[:, 2]


def slab_task(volume, seg, spacing, a, b, halo, memory_limit, workdir, keep="curves"):
    """Centreline of one slab core; writes and returns the path of its ``.npz``.

    ``keep`` is passed to :func:`skelmorph.thinning.thin` ("surfaces" keeps
    mid-surfaces too, for the bone set).

    ``spacing`` is in units of the finest voxel side.  The halo grows (to a
    multiple of ``SLAB_ALIGN``) when the core holds structures too thick
    for it; when the memory limit does not allow that, nothing is computed
    and ``{"need": halo}`` is returned instead.
    """
    from .thinning import distance_map_sq, thin

    nz = volume.shape[0]
    key = _task_key(volume, seg, spacing, a, b, halo) if keep == "curves" else \
        _task_key(volume, seg, spacing, a, b, halo) + "-" + keep
    path = Path(workdir) / f"slab-{a:06d}-{key}.npz"
    if path.exists():
        try:
            with np.load(path) as z:
                if int(z["a"]) == a:
                    return str(path)
        except Exception:  # noqa: BLE001 - a damaged file is redone
            pass
    plane_bytes = float(volume.shape[1]) * volume.shape[2] * BYTES_PER_VOXEL
    while True:
        lo, hi = _slab_extent(a, b, halo, nz)
        mask = seg(volume.planes(lo, hi))
        dsq = distance_map_sq(mask, spacing)
        core = dsq[a - lo:b - lo]
        r_max = float(np.sqrt(core.max())) if core.size else 0.0
        need = _align_up(max(SLAB_ALIGN, (HALO_RADII * r_max + 2) / spacing[0])) \
            if np.isfinite(r_max) else 2 * halo
        if need <= halo or (lo == 0 and hi == nz):
            break
        del mask, dsq, core
        if (b - a + 2 * need) * plane_bytes > memory_limit:
            return {"need": need}  # the caller plans thinner slabs
        halo = need
    n_fg = int(np.count_nonzero(mask[a - lo:b - lo]))
    skel = thin(mask, spacing, dsq=dsq, keep=keep)
    del mask
    coords = np.argwhere(skel)
    z = coords[:, 0] + lo
    in_core = (z >= a) & (z < b)
    before = (z >= a - SEAM_PLANES) & (z < a)
    after = (z >= b) & (z < b + SEAM_PLANES)
    dsq_core = dsq[tuple(coords[in_core].T)]  # float32, as in the whole volume
    shape = volume.shape
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            np.savez(fh, a=a, b=b, lo=lo, hi=hi, halo=halo, r_max=r_max, n_fg=n_fg,
                     flat=_flat(coords[in_core], lo, shape), dsq=dsq_core,
                     before=_flat(coords[before], lo, shape),
                     after=_flat(coords[after], lo, shape))
    return str(path)


def _seam_mismatches(results, slabs):
    """Seams (index of the slab above) where a slab's centreline past its core
    differs from its neighbour's core."""
    bad = []
    for k in range(len(slabs) - 1):
        up, down = results[k], results[k + 1]
        b = slabs[k][1]
        plane = int(np.prod(up["shape"][1:]))
        down_head = down["flat"][down["flat"] < (b + SEAM_PLANES) * plane]
        up_tail = up["flat"][up["flat"] >= (b - SEAM_PLANES) * plane]
        if not (np.array_equal(up["after"], down_head) and np.array_equal(down["before"], up_tail)):
            bad.append(k + 1)
    return bad


def _run_slabs(volume, seg, spacing, slabs, halo, memory_limit, workdir, workers, scheduler,
               progress, keep="curves"):
    """Run every slab task; their results by core start, and the halos asked
    for by slabs that did not fit."""
    from .engine import execute

    from .progress import Progress

    tasks = [(volume, seg, tuple(spacing), a, b, halo, memory_limit, str(workdir), keep)
             for a, b in slabs]
    bar = Progress(len(tasks), "slabs" if keep == "curves" else "surface slabs",
                   enabled=bool(progress))
    results, needs = {}, []
    for out in execute(slab_task, tasks, workers=workers, scheduler=scheduler,
                       name="skelmorph-slab"):
        if isinstance(out, dict):
            needs.append(out["need"])
            continue
        with np.load(out) as z:
            r = {k: z[k] for k in z.files}
        r["shape"] = volume.shape
        r["path"] = out
        results[int(r["a"])] = r
        bar.update(note=f"planes {int(r['a'])}-{int(r['b'])}")
    return results, needs


@dataclass
class ChunkedSkeleton:
    """Centreline voxels of a volume thinned in slabs."""

    coords: np.ndarray  # (n, 3) int64, C order
    radii: np.ndarray  # (n,) float64, distance to background (finest-voxel units)
    foreground: int  # voxels of the structure
    slabs: list  # [(a, b)] cores
    halo: int  # largest halo used, planes
    seam_warnings: list
    files: list = field(default_factory=list)  # [(a, b, path)] slab files, by core

    def take_voxels(self):
        """``(coords, radii)``, given up by this record (so that the graph
        build can free them once it no longer needs them)."""
        out = (self.coords, self.radii)
        self.coords = self.radii = None
        return out


class SkeletonVolume(Volume):
    """The voxels a slab-wise thinning kept (1, else 0), read back from its
    slab files plane range by plane range (so it travels to workers as paths)."""

    kind = "slab files"

    def __init__(self, shape, spacing, unit, files, source="thinned in slabs"):
        super().__init__(shape, np.uint8, spacing, unit, source)
        self.files = [(int(a), int(b), str(p)) for a, b, p in files]

    def planes(self, start, stop):
        plane = self.shape[1] * self.shape[2]
        out = np.zeros((stop - start) * plane, np.uint8)
        for a, b, path in self.files:
            if a < stop and b > start:
                with np.load(path) as z:
                    flat = z["flat"]
                i, j = np.searchsorted(flat, [start * plane, stop * plane])
                out[flat[i:j] - start * plane] = 1
        return out.reshape((stop - start,) + tuple(self.shape[1:]))


def chunked_skeleton(volume, seg, spacing, *, memory_limit, workdir, halo=None, workers=1,
                     scheduler=None, progress=False, keep="curves"):
    """Thin a volume slab by slab (see the module docstring).

    Parameters
    ----------
    volume : skelmorph.volume.Volume
    seg : Segmenter
    spacing : tuple of float
        Voxel size in units of the finest voxel side.
    memory_limit : int, bytes
        Shared by the local workers (see :func:`fitting_workers`).
    workdir : path
        Folder for the slab files (kept for resuming).
    halo : int, optional
        Initial halo in planes (default ``SLAB_ALIGN``; it grows as needed).
    workers, scheduler
        Local processes, or a Dask scheduler address (see :mod:`skelmorph.engine`).
    progress : bool
        A progress bar over the slabs on stderr.
    keep : {"curves", "surfaces"}
        What the thinning keeps (:func:`skelmorph.thinning.thin`); surface
        voxels are not gathered in ``coords`` (read them with
        :class:`SkeletonVolume` from ``files``).
    """
    Path(workdir).mkdir(parents=True, exist_ok=True)
    halo = _align_up(halo or DEFAULT_HALO)
    seam_warnings = []
    for attempt in range(3):
        while True:  # plan; plan again with a deeper halo if a slab asks for one
            n_run, task_limit = fitting_workers(volume.shape, memory_limit, halo, workers,
                                                scheduler)
            slabs = plan_slabs(volume.shape, task_limit, halo)
            results, needs = _run_slabs(volume, seg, spacing, slabs, halo, task_limit,
                                        workdir, n_run, scheduler, progress, keep)
            if not needs:
                break
            halo = max(needs)
        bad = _seam_mismatches([results[a] for a, _ in slabs], slabs)
        if not bad:
            break
        deeper = 2 * max(int(r["halo"]) for r in results.values())
        try:
            if attempt < 2:
                fitting_workers(volume.shape, memory_limit, deeper, workers, scheduler)
                halo = deeper
                continue
        except InputError:
            pass
        seam_warnings = [f"the centreline differs across the slab face at plane "
                         f"{slabs[k][0]} with a halo of {halo} planes; branches there may be "
                         "cut or doubled (a larger --memory-limit allows a deeper halo)"
                         for k in bad]
        break
    ordered = [results[a] for a, _ in slabs]
    if keep == "curves":
        flat = np.concatenate([r["flat"] for r in ordered])
        radii = np.sqrt(np.concatenate([r["dsq"] for r in ordered]).astype(np.float64))
        coords = np.column_stack(np.unravel_index(flat, volume.shape)).astype(np.int64)
    else:  # surfaces are read back from the files (SkeletonVolume), not gathered
        coords, radii = np.zeros((0, 3), np.int64), np.zeros(0)
    return ChunkedSkeleton(coords, radii, int(sum(int(r["n_fg"]) for r in ordered)), slabs,
                           int(max(int(r["halo"]) for r in ordered)), seam_warnings,
                           [(a, b, results[a]["path"]) for a, b in slabs])


# ----------------------------------------------------------------------------- other passes

def cavity_task(volume, seg, a, b):
    """Face-connected background components of planes ``a:b``: their number,
    which touch the volume's faces (index 0 = structure), and the labels of
    the first and last plane (to join them across slab faces)."""
    from scipy import ndimage as ndi
    nz = volume.shape[0]
    labels, n = ndi.label(~seg(volume.planes(a, b)))
    edge = np.zeros(n + 1, bool)
    for axis, index in ((1, 0), (1, -1), (2, 0), (2, -1)):
        edge[np.unique(np.take(labels, index, axis=axis))] = True
    if a == 0:
        edge[np.unique(labels[0])] = True
    if b == nz:
        edge[np.unique(labels[-1])] = True
    return a, n, edge, labels[0].copy(), labels[-1].copy()


def chunked_cavities(volume, seg, slabs, progress=False, workers=1, scheduler=None):
    """Enclosed background components of the segmented volume, counted slab
    by slab: face-connected labels in each core (:func:`cavity_task`, on the
    workers), joined across slab faces with a union-find, and those that
    touch the volume's faces left out (as
    :func:`skelmorph.segment.count_cavities`)."""
    from .engine import execute
    from .progress import Progress
    bar = Progress(len(slabs), "cavities", enabled=bool(progress))
    found = {}
    for a, *rest in execute(cavity_task, [(volume, seg, a, b) for a, b in slabs],
                            workers=workers, scheduler=scheduler, name="skelmorph-cavities"):
        found[a] = rest
        bar.update()
    parent = [0]  # label 0 = structure
    touches = [True]

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    prev_last = None
    for a, _ in slabs:  # in plane order: labels numbered as by one pass
        n, edge, first, last = found.pop(a)
        base = len(parent) - 1
        parent.extend(range(base + 1, base + n + 1))
        touches.extend(edge[1:].tolist())
        first = np.where(first > 0, first + base, 0)
        if prev_last is not None:
            both = (prev_last > 0) & (first > 0)
            pairs = np.unique(np.column_stack([prev_last[both], first[both]]), axis=0)
            for i, j in pairs.tolist():
                ri, rj = find(i), find(j)
                if ri != rj:
                    parent[rj] = ri
                    touches[ri] = touches[ri] or touches[rj]
        prev_last = np.where(last > 0, last + base, 0)
    roots = {find(i) for i in range(1, len(parent))}
    return sum(1 for r in roots if not touches[r])


def branch_volume_task(volume, seg, spacing, a, b, halo, points, labels, n_edges):
    """``(a, volumes)``: branch volumes counted on the core ``a:b``, flooded with its halo
    (:func:`skelmorph.radius.branch_volumes`); ``points`` are the seed
    points within the slab and its halo (physical units, whole-volume origin)."""
    from .radius import branch_volumes
    lo, hi = _slab_extent(a, b, halo, volume.shape[0])
    shift = np.zeros(points.shape[1])
    shift[0] = lo * float(spacing[0])
    return a, branch_volumes(seg(volume.planes(lo, hi)), spacing, points - shift, labels,
                             n_edges, count_from=a - lo, count_to=b - lo)


def chunked_branch_volumes(volume, seg, spacing, slabs, halo, progress=False, workers=1,
                           scheduler=None):
    """A ``volumes`` callable for :func:`skelmorph.radius.equivalent_radius`:
    each branch's voxels counted slab by slab (:func:`branch_volume_task`,
    on the workers), every slab flooded with its halo so that voxels near a
    face go to the same branch as in the whole."""
    from .engine import execute
    from .progress import Progress

    sp = np.asarray(spacing, float)

    def volumes(raw_points, label_of_point, n_edges):
        zidx = np.rint(raw_points[:, 0] / sp[0]).astype(np.int64)
        nz = volume.shape[0]

        def task(a, b):
            lo, hi = _slab_extent(a, b, halo, nz)
            pick = (zidx >= lo) & (zidx < hi)
            return (volume, seg, tuple(sp), a, b, halo, raw_points[pick], label_of_point[pick],
                    n_edges)

        bar = Progress(len(slabs), "branch radii", enabled=bool(progress))
        total = np.zeros(n_edges)
        # As many slabs' seed points at a time as run at once (each is a copy),
        # added in slab order (the same sums whatever finishes first).
        wave = len(slabs) if scheduler is not None else max(1, int(workers))
        for k in range(0, len(slabs), wave):
            parts = {}
            for a, part in execute(branch_volume_task, [task(a, b) for a, b in slabs[k:k + wave]],
                                   workers=workers, scheduler=scheduler,
                                   name="skelmorph-branch-volumes"):
                parts[a] = part
                bar.update()
            for a in sorted(parts):
                total += parts[a]
        return total
    return volumes


#: Working memory of the whole analysis in memory, bytes per voxel: the
#: graph alone, and with field measures (measured on a 512^3 foam by
#: ``scripts/bench.py --only memory``: 14.9 and, with the bone set, 17.8;
#: rounded up for denser structures, whose thinning queue and branch flood
#: grow with the solid fraction).
IN_MEMORY_BYTES_PER_VOXEL = (18, 24)


def slab_volume(path, spacing, unit, memory_limit, sets):
    """The volume at ``path`` when it is to be analysed in slabs, else None.

    A 3D TIFF, ``.npy``, slice folder or OME-Zarr store goes to slabs when
    its analysis in memory would need more than ``memory_limit`` bytes.
    """
    import warnings

    from .errors import SkelmorphError
    from .volume import is_zarr_store, open_volume

    path = Path(path)
    try:
        regular = path.is_dir() or (path.is_file() and path.suffix.lower() in
                                    (".tif", ".tiff", ".npy"))
    except OSError:
        regular = False
    if not regular:  # read_image says why (a pipe, a device, a 2D format)
        return None
    with warnings.catch_warnings(record=True) as said:  # read_image says it otherwise
        warnings.simplefilter("always")
        try:
            vol = open_volume(path, spacing, unit)
        except SkelmorphError:
            if is_zarr_store(path):
                raise
            return None  # read_image gives the reason, or reads a 2D image
    need = float(np.prod(vol.shape, dtype=np.float64)) * IN_MEMORY_BYTES_PER_VOXEL[bool(sets)]
    if need <= memory_limit:
        return None
    for w in said:  # the voxel-size warnings of the file, once
        warnings.warn(w.message, w.category, stacklevel=3)
    return vol


#: Options that need more than one voxel at a time, with their flags.
_NOT_IN_SLABS = {"channel": "--channel", "enhance": "--enhance",
                 "hysteresis": "--hysteresis", "measures": "--measures",
                 "thickness_map": "--thickness-map"}


def check_slab_options(options):
    """Refuse, in one line, an option that the analysis in slabs cannot honour."""
    roi = options.get("roi")  # an ROI file is read in slabs too; an array or 'auto' is not
    if isinstance(roi, np.ndarray):
        raise InputError("this scan is analysed in slabs; give its ROI as a file "
                         "(TIFF, .npy, slice folder or OME-Zarr), not an array")
    if isinstance(roi, str) and roi == "auto":
        raise InputError("this scan is analysed in slabs and --roi auto needs the whole image "
                         "(its field of view); give an ROI file, crop the scan, or raise "
                         "--memory-limit")
    for name, flag in _NOT_IN_SLABS.items():
        value = options.get(name)
        if name == "measures" and list(value or []) == ["bone"]:
            continue  # the bone set runs in slabs (but direct Tb.N, plates and rods)
        if value not in (None, False, [], ()):
            raise InputError(f"this scan is analysed in slabs (in memory it would need more "
                             f"than the memory limit) and {flag}"
                             + (" other than bone" if name == "measures" else "")
                             + " is not available in slabs yet; crop or downsample the scan, "
                             "or raise --memory-limit")
    if options.get("thinning", "ordered") != "ordered":
        raise InputError("this scan is analysed in slabs, which uses skelmorph's own thinning; "
                         "--thinning lee/zhang needs the whole scan in memory")


def work_folder(out, source):
    """Where slab files go: ``OUT/.slabs`` or a folder beside the temporary directory."""
    if out is not None:
        return Path(out) / ".slabs"
    import tempfile
    tag = hashlib.sha1(str(source).encode()).hexdigest()[:10]
    return Path(tempfile.gettempdir()) / f"skelmorph-slabs-{tag}-{os.getuid()}"


def chunked_graph(volume, seg, *, memory_limit, workdir, halo=None, workers=1, scheduler=None,
                  progress=False, timings=None, unit=None, prune=True, prune_factor=1.5,
                  min_branch_length=0.0, merge_junctions=True, extend_tips=False, smoothing=2.0):
    """The centreline graph of a volume analysed in slabs.

    Equal to :func:`skelmorph.skeleton_graph` of the whole segmented volume
    (same thinning voxel for voxel, same graph steps; branch volumes for the
    equivalent radii are counted per slab with the same halo).

    Returns
    -------
    graph : SkeletonGraph
    info : dict
        ``foreground`` (voxels), ``n_chunks``, ``halo`` (planes),
        ``warnings`` and ``cavities`` (a function counting the mask's
        enclosed cavities, once).
    """
    import time

    from .build import _graph_of_taken_voxels, rescale_graph

    t0 = time.perf_counter()
    scale = min(volume.spacing)
    spacing = tuple(s / scale for s in volume.spacing)
    cs = chunked_skeleton(volume, seg, spacing, memory_limit=memory_limit, workdir=workdir,
                          halo=halo, workers=workers, scheduler=scheduler, progress=progress)
    from .segment import check_foreground_count
    check_foreground_count(cs.foreground, int(np.prod(volume.shape, dtype=np.int64)))
    if timings is not None:
        timings["skeletonize"] = time.perf_counter() - t0
    found = {}
    # The second passes use the thinning's slabs; they need less memory per
    # voxel, so every local worker may run one.
    from .engine import local_workers
    n_run = 1 if scheduler is not None else local_workers(workers)

    def cavities():  # counted once, when first asked for
        if "n" not in found:
            found["n"] = chunked_cavities(volume, seg, cs.slabs, progress, n_run, scheduler)
        return found["n"]

    graph = _graph_of_taken_voxels(
        cs.take_voxels, volume.shape, spacing, cavities,
        chunked_branch_volumes(volume, seg, spacing, cs.slabs, cs.halo, progress, n_run,
                               scheduler),
        volume.unit if unit is None else unit, prune, prune_factor,
        min_branch_length / scale, merge_junctions, extend_tips, smoothing, timings,
        {"resampled_isotropic": False, "thinning_spacing": list(volume.spacing),
         "thinning": "ordered", "n_chunks": len(cs.slabs), "halo_planes": cs.halo})
    graph = rescale_graph(graph, scale, volume.spacing, volume.shape)
    return graph, {"foreground": cs.foreground, "n_chunks": len(cs.slabs), "halo": cs.halo,
                   "warnings": cs.seam_warnings, "cavities": cavities}


class LazyMask:
    """The segmented volume, read and segmented a plane range at a time when
    sliced along the first axis (``mask[a:b]``), for the slab-wise bone
    measures of :mod:`skelmorph.measure.bone`."""

    ndim = 3
    reads_planes = True  # what skelmorph.measure.bone checks for

    def __init__(self, volume, seg, foreground):
        self.volume, self.seg, self.foreground = volume, seg, int(foreground)
        self.shape = tuple(volume.shape)
        self.size = int(np.prod(self.shape, dtype=np.int64))

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        z = key[0]
        if not isinstance(z, slice) or z.step not in (None, 1):
            raise TypeError("a lazy mask is read by plane ranges only")
        a, b, _ = z.indices(self.shape[0])
        return self._planes(a, b)[(slice(None),) + key[1:]]

    def _planes(self, a, b):
        """The segmented planes a..b-1."""
        return self.seg(self.volume.planes(a, b))

    def any(self):
        return self.foreground > 0

    def all(self):
        return self.foreground == self.size


#: Working memory of the surface meshes of a bone slab, bytes per voxel
#: (marching cubes of the binary and the smoothed slab: about 60, rounded up).
BONE_SLAB_BYTES_PER_VOXEL = 64

#: Planes the surface, Euler and intercept parts read beyond a plane range:
#: the smoothing kernel's reach plus two before, one more after.
_BONE_HALO = 6


class _PlaneBlock(LazyMask):
    """Planes ``lo:hi`` of a lazy mask read once and served as if from the
    whole mask (the slab-wise bone code asks only for planes in the block)."""

    def __init__(self, volume, seg, foreground, lo, hi):
        super().__init__(volume, seg, foreground)
        self.lo, self.hi = int(lo), int(hi)
        self.block = seg(volume.planes(self.lo, self.hi))

    def _planes(self, a, b):
        if a < self.lo or max(a, b) > self.hi:
            raise IndexError(f"planes {a}-{b} are outside the block {self.lo}-{self.hi}")
        return self.block[a - self.lo:max(a, b) - self.lo]


def bone_slab_task(volume, seg, foreground, spacing, a, b, roi=None):
    """The additive bone parts of planes ``a:b``: surface sums over cube
    layers a..b-1, Euler contributions of the planes (plain and
    edge-corrected) and intercept counts of pairs starting in them; with an
    ROI volume, edge-corrected in it and counted inside it, as in memory."""
    from .measure.bone import euler_in_region, mil_counts, surface_sums
    nz = volume.shape[0]
    lo, hi = max(0, a - _BONE_HALO), min(nz, b + _BONE_HALO + 1)
    block = _PlaneBlock(volume, seg, foreground, lo, hi)
    region = None if roi is None else _PlaneBlock(roi, Segmenter("binary", 0.0), 0, lo, hi)
    whole = (b - a + 2 * _BONE_HALO + 2) * volume.shape[1] * volume.shape[2]  # one pass each
    end = min(nz, b + 2)
    return a, {"surface": surface_sums(block, spacing, roi=region, slab_voxels=whole,
                                       layers=(a, b)),
               "euler": euler_in_region(block, slab_voxels=whole, planes=(a, b)),
               "euler_edge": euler_in_region(block, True if roi is None else region,
                                             slab_voxels=whole, planes=(a, b)),
               "intercepts": mil_counts(block[a:end], n_first=b - a,
                                        roi=None if roi is None else region[a:end])}


def chunked_bone_measures(volume, seg, spacing, foreground, cavities, memory_limit, *,
                          workers=1, scheduler=None, progress=False, workdir=None, timings=None,
                          roi=None, roi_count=None):
    """The bone set of a scan read in slabs.

    BV/TV, BS/BV, BS/TV, SMI, the Euler characteristic and Conn.D
    (edge-corrected) come from the slab-wise code of
    :mod:`skelmorph.measure.bone` on planes read on demand; DA from
    mean-intercept counts summed over slabs; Tb.Th and Tb.Sp (with SDs) from
    the local thickness in slabs with halos as deep as the largest sphere
    needs (:mod:`skelmorph.slab_thickness`), and Tb.N from those; direct
    Tb.N from a surface skeleton thinned in slabs (kept in ``workdir``, a
    temporary folder by default) and the local thickness of its complement
    in slabs.  All equal the whole volume's (tested).  The plates and rods
    need components of the whole surface skeleton and are not computed.

    ``timings``, a dict, gets the seconds of each part ("bone surface,
    euler, intercepts", "bone Tb.Th", "bone Tb.Sp", "bone Tb.N.direct").

    ``roi`` (a volume of the same shape, non-zero inside, holding
    ``roi_count`` voxels) is the region of interest: the volume is then the
    ROI's tight box with the mask clipped to it, TV is the ROI's volume, and
    every part treats the ROI's outside as :func:`skelmorph.measure.bone.bone_measures`
    does.

    Returns
    -------
    dict
    """
    import time

    from .engine import execute, local_workers
    from .measure.bone import mil_fit, smi_of_sums
    from .progress import Progress
    from .slab_thickness import slab_local_thickness

    lazy = LazyMask(volume, seg, foreground)
    voxel = float(np.prod(spacing))
    if roi is not None and roi_count == lazy.size:
        roi = None  # a box: the image-edge conventions apply, as in memory
    tv = (lazy.size if roi is None else int(roi_count)) * voxel
    bv = foreground * voxel
    timings = {} if timings is None else timings
    clock = [time.perf_counter()]

    def lap(name):
        now = time.perf_counter()
        timings[f"bone {name}"] = now - clock[0]
        clock[0] = now

    # Surface, Euler characteristics and intercepts: additive over plane
    # ranges, each read once by a task (in parallel on local workers).
    n_run = 1 if scheduler is not None else local_workers(workers)
    plane = lazy.shape[1] * lazy.shape[2]
    nz = lazy.shape[0]
    planes = max(8, int(memory_limit // BONE_SLAB_BYTES_PER_VOXEL // n_run // plane))
    tasks = [(volume, seg, foreground, tuple(spacing), a, min(a + planes, nz), roi)
             for a in range(0, nz, planes)]
    bar = Progress(len(tasks), "surface, Euler, intercepts", enabled=bool(progress))
    parts = {}
    for a, part in execute(bone_slab_task, tasks, workers=n_run, scheduler=scheduler,
                           name="skelmorph-bone-slab"):
        parts[a] = part
        bar.update()
    ordered = [parts[a] for a in sorted(parts)]  # summed in plane order: deterministic
    bs, smi = smi_of_sums(np.sum([p["surface"] for p in ordered], axis=0), bv, spacing)
    chi = int(round(sum(p["euler"] for p in ordered)))
    dchi = sum(p["euler_edge"] for p in ordered)
    total = {}
    for p in ordered:
        for v, (c, n) in p["intercepts"].items():
            t = total.setdefault(v, [0, 0])
            t[0] += c
            t[1] += n
    da, axes = mil_fit(total, spacing)
    lap("surface, euler, intercepts")
    out = {"BV/TV": bv / tv, "BS/BV": bs / bv, "Conn.D": (cavities - dchi) / tv + 0.0,
           "SMI": smi, "DA": da, "TV": tv, "BV": bv, "BS": bs, "BS/TV": bs / tv,
           "euler_characteristic": chi, "euler_edge_corrected": dchi, "cavities": cavities,
           "MIL_axes": [float(x) for x in axes]}
    try:
        th, th_sd, th_step, th_halo = slab_local_thickness(
            volume, seg, spacing, "solid", memory_limit, workers=workers, scheduler=scheduler,
            progress=progress, roi=roi)
        lap("Tb.Th")
        sp, sp_sd, sp_step, sp_halo = slab_local_thickness(
            volume, seg, spacing, "space", memory_limit, workers=workers, scheduler=scheduler,
            progress=progress, roi=roi)
        lap("Tb.Sp")
    except InputError as exc:  # the limit is too small for the spheres' halo
        out["skipped"] = (f"Tb.Th, Tb.Sp and Tb.N were not computed: {exc} (a larger "
                          "--memory-limit allows them)")
        return out
    out.update({"Tb.Th": th, "Tb.Th.SD": th_sd, "Tb.Sp": sp, "Tb.Sp.SD": sp_sd,
                "Tb.N": 1.0 / (th + sp),
                "thickness_lattice_step": th_step, "separation_lattice_step": sp_step,
                "thickness_halo": th_halo * float(spacing[0]),
                "separation_halo": sp_halo * float(spacing[0])})
    try:
        out.update(_direct_tbn_in_slabs(volume, seg, spacing, memory_limit, workers, scheduler,
                                        progress, workdir, roi))
        lap("Tb.N.direct")
    except InputError as exc:
        out["skipped"] = (f"Tb.N.direct was not computed: {exc} (a larger --memory-limit "
                          "allows it)")
    return out


def _direct_tbn_in_slabs(volume, seg, spacing, memory_limit, workers, scheduler, progress,
                         workdir, roi=None):
    """Tb.N.direct (Hildebrand et al. 1999, :func:`skelmorph.measure.bone.direct_trabecular_number`):
    the surface skeleton thinned in slabs, then the mean local thickness of
    the voxels off it, with it as the only walls, in slabs."""
    import tempfile

    from .slab_thickness import slab_local_thickness
    scale = min(spacing)
    unit_spacing = tuple(float(s) / scale for s in spacing)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(workdir) / "surfaces" if workdir is not None else Path(tmp)
        sk = chunked_skeleton(volume, seg, unit_spacing, memory_limit=memory_limit,
                              workdir=folder, workers=workers, scheduler=scheduler,
                              progress=progress, keep="surfaces")
        skel = SkeletonVolume(volume.shape, volume.spacing, volume.unit, sk.files)
        mean, _, _, halo = slab_local_thickness(skel, Segmenter("binary", 0.0), spacing, "space",
                                                memory_limit, workers=workers,
                                                scheduler=scheduler, progress=progress, roi=roi)
    return {"Tb.N.direct": 1.0 / mean, "skeleton_gap_halo": halo * float(spacing[0])}
