"""Volumes read a slab of planes at a time, for scans larger than memory.

:func:`open_volume` opens a 3D image without loading it: an uncompressed
multi-page TIFF or a ``.npy`` file is read by plain file reads of plane
ranges (a memory map would keep every page read resident), a compressed
TIFF is read page by page, a folder of 2D slices file by file, and an OME-Zarr
store (the open NGFF format, read with the ``zarr`` package) chunk by
chunk.  Every kind answers :meth:`Volume.planes`, the planes
``start:stop`` along the first axis as an ndarray; that is all the chunked
analysis (:mod:`skelmorph.chunked`) asks of it.

OME-Zarr: the first (finest) dataset of the first multiscale image is
read; the voxel size is the product of its ``scale`` transformations and
the unit that of the spatial axes (NGFF 0.4 and 0.5 metadata; Moore J et
al. (2021) OME-NGFF: a next-generation file format for expanding bioimaging
data-access strategies. Nat Methods 18:1496-1498).  Axes other than z, y, x
(time, channel) must have length 1.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .errors import ImageReadError
from .io import (IMAGE_SUFFIXES, _check_data_length, _natural_key, _npy_header, _read_file,
                 _tiff_header, resolve_spacing)

__all__ = ["Volume", "ArrayVolume", "SmoothedVolume", "open_volume", "is_zarr_store",
           "write_ome_zarr"]

_TIFF = {".tif", ".tiff"}


class Volume:
    """A 3D image read on demand.

    Attributes
    ----------
    shape : tuple of int
    dtype : numpy dtype
    spacing : tuple of float
        Voxel size, ``(z, y, x)``, in ``unit``.
    unit : str
    source : str
    kind : str
        How it is read: ``"file reads"``, ``"tiff pages"``, ``"slice folder"``,
        ``"ome-zarr"`` or ``"array"``.
    """

    kind = "array"

    def __init__(self, shape, dtype, spacing, unit, source):
        self.shape = tuple(int(n) for n in shape)
        self.dtype = np.dtype(dtype)
        self.spacing = spacing
        self.unit = unit
        self.source = source

    @property
    def ndim(self):
        return len(self.shape)

    def planes(self, start, stop):
        """Planes ``start:stop`` of the first axis, as an in-memory array."""
        raise NotImplementedError

    def __reduce__(self):
        # A volume opened from a file travels to worker processes as its
        # path (reopened there), never as its data.
        path = getattr(self, "opened_from", None)
        if path is None:
            return super().__reduce__()
        return (open_volume, (path, self.spacing, self.unit))

    def __repr__(self):
        return (f"{type(self).__name__}({self.source!r}, shape={self.shape}, "
                f"dtype={self.dtype}, spacing={self.spacing} {self.unit})")


class ArrayVolume(Volume):
    """An array already in memory (or any array-like sliced by planes)."""

    def __init__(self, array, spacing, unit, source="array"):
        super().__init__(array.shape, array.dtype, spacing, unit, source)
        self.array = array

    def planes(self, start, stop):
        return np.array(self.array[start:stop])


class SmoothedVolume(Volume):
    """A volume seen through a Gaussian filter of ``sigma`` (physical units).

    Each request reads the planes it asks for plus the filter's reach on
    both sides (``int(4 sigma / dz + 0.5)`` planes, the kernel radius of
    ``scipy.ndimage.gaussian_filter``) and filters them; at the volume's own
    ends the filter mirrors, as on the whole volume.  Every voxel is thus
    computed from the same values in the same order as when the whole
    volume is filtered at once: the planes equal that result exactly
    (tested).
    """

    def __init__(self, base, sigma):
        sigma = float(sigma)
        super().__init__(base.shape, np.float32, base.spacing, base.unit,
                         f"{base.source} (Gaussian sigma {sigma:g})")
        self.base = base
        self.sigma = sigma
        self.kind = f"{base.kind}, smoothed"
        self.sigmas = tuple(sigma / float(s) for s in base.spacing)
        self.reach = int(4.0 * self.sigmas[0] + 0.5)

    def planes(self, start, stop):
        from scipy import ndimage as ndi
        lo, hi = max(0, start - self.reach), min(self.shape[0], stop + self.reach)
        raw = np.asarray(self.base.planes(lo, hi), np.float32)
        return ndi.gaussian_filter(raw, self.sigmas)[start - lo:stop - lo]


class RawFileVolume(Volume):
    """Uncompressed C-order data at a byte offset of a file (``.npy``,
    contiguous TIFF), read plane ranges with plain file reads.  Unlike a
    memory map, the pages read do not stay in the process's memory."""

    kind = "file reads"

    def __init__(self, path, offset, shape, dtype, spacing, unit):
        super().__init__(shape, dtype, spacing, unit, str(path))
        self.path = Path(path)
        self.offset = int(offset)

    def planes(self, start, stop):
        plane = int(np.prod(self.shape[1:]))
        with open(self.path, "rb") as fh:
            fh.seek(self.offset + start * plane * self.dtype.itemsize)
            data = np.fromfile(fh, self.dtype, count=(stop - start) * plane)
        if data.size != (stop - start) * plane:
            raise ImageReadError(f"{self.path} ends before plane {stop}: the file is truncated")
        return data.reshape((stop - start,) + self.shape[1:])


class TiffPagesVolume(Volume):
    """A multi-page TIFF whose pages are compressed or scattered: page by page."""

    kind = "tiff pages"

    def __init__(self, path, shape, dtype, spacing, unit):
        super().__init__(shape, dtype, spacing, unit, str(path))
        self.path = path

    def planes(self, start, stop):
        import tifffile
        try:
            with tifffile.TiffFile(self.path) as tif:
                out = tif.series[0].asarray(key=list(range(start, stop)))
        except Exception as exc:  # noqa: BLE001 - tifffile raises many kinds
            raise ImageReadError(f"cannot read planes {start}-{stop} of {self.path}: "
                                 f"{exc.__class__.__name__}: {exc}") from None
        return np.asarray(out).reshape((stop - start,) + self.shape[1:])


class FolderVolume(Volume):
    """A folder of 2D slices, one file per plane, read when asked for."""

    kind = "slice folder"

    def __init__(self, files, shape, dtype, spacing, unit, source):
        super().__init__(shape, dtype, spacing, unit, source)
        self.files = files

    def planes(self, start, stop):
        out = np.empty((stop - start,) + self.shape[1:], self.dtype)
        for i, f in enumerate(self.files[start:stop]):  # one file per plane
            plane = _read_file(f)[0]
            if plane.shape != self.shape[1:]:
                raise ImageReadError(f"slice {f.name} has shape {plane.shape}, unlike the first "
                                     f"slice {self.shape[1:]}; all slices must have the same size")
            out[i] = plane
        return out


class ZarrVolume(Volume):
    """The finest level of an OME-Zarr image (or a plain 3D zarr array)."""

    kind = "ome-zarr"

    def __init__(self, array, index, shape, spacing, unit, source):
        super().__init__(shape, array.dtype, spacing, unit, source)
        self.array = array
        self.index = index  # picks z, y, x out of the stored axes

    def planes(self, start, stop):
        sel = tuple(slice(start, stop) if k == "z" else (slice(None) if k in "yx" else 0)
                    for k in self.index)
        return np.asarray(self.array[sel]).reshape((stop - start,) + self.shape[1:])


def is_zarr_store(path):
    """A folder that holds zarr metadata (version 2 or 3)."""
    path = Path(path)
    return path.is_dir() and any((path / n).exists()
                                 for n in ("zarr.json", ".zgroup", ".zarray", ".zattrs"))


def _ome_metadata(attrs):
    """The first multiscale entry of NGFF 0.4 (top level) or 0.5 (under "ome")."""
    attrs = dict(attrs)
    ms = attrs.get("multiscales") or (attrs.get("ome") or {}).get("multiscales")
    return ms[0] if ms else None


def _open_zarr(path):
    try:
        import zarr
    except ImportError:
        raise ImageReadError(f"{path} is a zarr store; reading it needs the zarr package "
                             "(pip install zarr)") from None
    try:
        node = zarr.open(str(path), mode="r")
    except Exception as exc:  # noqa: BLE001
        raise ImageReadError(f"cannot open zarr store {path}: {exc.__class__.__name__}: "
                             f"{exc}") from None
    source = str(path)
    if hasattr(node, "shape"):  # a plain array
        if node.ndim != 3:
            raise ImageReadError(f"zarr array {path} has {node.ndim} axes; a 3D volume is needed")
        return ZarrVolume(node, "zyx", node.shape, None, None, source)
    meta = _ome_metadata(node.attrs)
    if meta is None:
        raise ImageReadError(f"zarr group {path} has no OME multiscales metadata; point to an "
                             "OME-Zarr image or to a 3D array inside the store")
    first = meta["datasets"][0]
    try:
        array = node[first["path"]]
    except KeyError:
        raise ImageReadError(f"OME-Zarr {path}: dataset {first['path']!r} is missing") from None
    axes = meta.get("axes") or [{"name": n} for n in "tczyx"[-array.ndim:]]
    names = [a["name"] if isinstance(a, dict) else str(a) for a in axes]
    if len(names) != array.ndim:
        raise ImageReadError(f"OME-Zarr {path}: {len(names)} axes named for a {array.ndim}D array")
    scale = [1.0] * array.ndim
    for t in list(meta.get("coordinateTransformations", [])) + list(
            first.get("coordinateTransformations", [])):
        if t.get("type") == "scale":
            scale = [a * float(b) for a, b in zip(scale, t["scale"])]
    index, shape, spacing, units = [], [], [], set()
    for name, n, s, ax in zip(names, array.shape, scale, axes):
        if name in ("z", "y", "x"):
            index.append(name)
            shape.append(n)
            spacing.append(s)
            if isinstance(ax, dict) and ax.get("unit"):
                units.add(ax["unit"])
        elif n != 1:
            raise ImageReadError(f"OME-Zarr {path} has a {name!r} axis of length {n}; "
                                 "skelmorph reads one 3D image (length 1 on other axes)")
        else:
            index.append(name)
    if [k for k in index if k in "zyx"] != ["z", "y", "x"]:
        raise ImageReadError(f"OME-Zarr {path} has axes {names}; z, y and x are needed, "
                             "in that order")
    if len(units) > 1:
        raise ImageReadError(f"OME-Zarr {path} gives different units per axis {sorted(units)}")
    unit = units.pop() if units else None
    return ZarrVolume(array, index, shape, tuple(spacing), unit, source)


def _open_tiff(path):
    h = _tiff_header(path)
    if h.is_rgb:
        raise ImageReadError(f"TIFF {path} is a colour image; large scans are read as one grey "
                             "or binary channel")
    if h.dataoffset is not None:
        _check_data_length(path, h.dataoffset, h.shape, h.dtype, "TIFF")
        return RawFileVolume(path, h.dataoffset, h.shape, h.dtype, h.spacing, h.unit)
    return TiffPagesVolume(path, h.shape, h.dtype, h.spacing, h.unit)


def _open_npy(path):
    shape, fortran, dtype, offset = _npy_header(path)
    if fortran or dtype.hasobject:
        raise ImageReadError(f"{path}: large .npy arrays must be stored in C order, "
                             "without Python objects")
    _check_data_length(path, offset, shape, dtype, "array")
    return RawFileVolume(path, offset, shape, dtype, None, None)


def _open_folder(path):
    files = sorted((p for p in path.iterdir() if p.suffix.lower() in IMAGE_SUFFIXES),
                   key=lambda p: _natural_key(p.name))
    if not files:
        raise ImageReadError(f"folder {path} holds no image slices "
                             f"({', '.join(sorted(IMAGE_SUFFIXES))})")
    first, spacing, unit, is_rgb = _read_file(files[0])
    if first.ndim != 2 or is_rgb:
        raise ImageReadError(f"slice {files[0].name} is not a 2D grey image (shape {first.shape})")
    if spacing is not None:
        spacing = (None,) + tuple(spacing[-2:])
    return FolderVolume(files, (len(files),) + first.shape, first.dtype, spacing, unit, str(path))


def open_volume(path, spacing=None, unit=None):
    """Open a 3D image for reading a slab at a time.

    Parameters
    ----------
    path : str or Path
        Multi-page TIFF, ``.npy``, a folder of 2D slices, or an OME-Zarr
        store (a folder with zarr metadata).
    spacing, unit : optional
        Override the file's voxel size and unit, as in :func:`skelmorph.read_image`.

    Returns
    -------
    Volume

    Raises
    ------
    ImageReadError
        Missing, unreadable or damaged files, colour images, 2D images.
    SpacingError
        A bad voxel size.
    """
    path = Path(path)
    if not path.exists():
        raise ImageReadError(f"no such file or folder: {path}")
    if is_zarr_store(path):
        vol = _open_zarr(path)
    elif path.is_dir():
        vol = _open_folder(path)
    elif path.suffix.lower() in _TIFF:
        vol = _open_tiff(path)
    elif path.suffix.lower() == ".npy":
        vol = _open_npy(path)
    else:
        raise ImageReadError(f"{path}: large scans are read from a multi-page TIFF, a .npy file, "
                             "a folder of slices or an OME-Zarr store")
    if vol.ndim != 3:
        raise ImageReadError(f"{path} holds a {vol.ndim}D image; reading in slabs is for 3D "
                             "volumes (2D images are read whole)")
    if min(vol.shape) < 1:
        raise ImageReadError(f"{path} holds an empty image (shape {vol.shape})")
    vol.spacing, vol.unit = resolve_spacing(vol.spacing, vol.unit, spacing, unit, 3, vol.source)
    vol.opened_from = str(path)
    return vol


def write_ome_zarr(path, array, spacing, unit="micrometer", chunks=None):
    """Write a 3D array as a one-level OME-Zarr image (NGFF 0.4 metadata).

    A small writer for tests and examples; real stores come from the
    scanner's software or converters.
    """
    import zarr
    root = zarr.open_group(str(path), mode="w", zarr_format=2)
    chunks = chunks or tuple(min(n, 64) for n in array.shape)
    arr = root.create_array("0", shape=array.shape, dtype=array.dtype, chunks=chunks)
    arr[:] = array
    root.attrs["multiscales"] = [{
        "version": "0.4",
        "axes": [{"name": n, "type": "space", "unit": unit} for n in "zyx"],
        "datasets": [{"path": "0", "coordinateTransformations": [
            {"type": "scale", "scale": [float(s) for s in spacing]}]}],
    }]
    return path
