"""Reading images with their voxel size, and writing results atomically.

Arrays keep numpy axis order, ``(z, y, x)`` in 3D and ``(y, x)`` in 2D, and the
voxel size (``spacing``) is a tuple in the same order, in physical units.
"""

from __future__ import annotations

import contextlib
import csv
import json
import os
import re
import tempfile
import warnings
from pathlib import Path
from typing import NamedTuple

import numpy as np

from .errors import ImageReadError, InputError, SpacingError

__all__ = [
    "ImageData",
    "read_image",
    "check_image_array",
    "validate_spacing",
    "normalise_unit",
    "atomic_write",
    "atomic_path",
    "write_json",
    "write_csv",
    "estimate_memory",
    "write_tiff",
]

IMAGE_SUFFIXES = {".tif", ".tiff", ".png", ".jpg", ".jpeg", ".bmp", ".gif"}
_TIFF_SUFFIXES = {".tif", ".tiff"}

# Working memory of the pipeline relative to one byte per voxel of the input:
# the mask, its skeleton, a padded copy, labels of the boundary (int32) and
# thinning scratch space.  Measured on the foam phantom (scripts/bench.py).
_BYTES_PER_VOXEL = 12
_MAX_VOXELS = 2**34  # beyond this a volume is certainly a mistake on this machine
#: Accepted voxel sizes, in any unit: wide enough for nm to km images, narrow
#: enough that lengths, areas and volumes stay far from float64's limits.
SPACING_RANGE = (1e-15, 1e15)


class ImageData(NamedTuple):
    """An image with its voxel size.

    Attributes
    ----------
    array : ndarray
        Image data, axis order ``(z, y, x)`` or ``(y, x)``.
    spacing : tuple of float
        Voxel size per axis, in ``unit``.
    unit : str
        Length unit of ``spacing`` (``"um"`` unless the file or caller says otherwise).
    """

    array: np.ndarray
    spacing: tuple
    unit: str


_UNIT_ALIASES = {
    "um": "um", "µm": "um", "μm": "um", "micron": "um", "microns": "um", "micrometer": "um",
    "micrometre": "um", "\\u00b5m": "um", "nm": "nm", "nanometer": "nm", "mm": "mm",
    "millimeter": "mm", "millimetre": "mm", "cm": "cm", "centimeter": "cm", "m": "m",
    "meter": "m", "metre": "m", "px": "px", "pixel": "px", "pixels": "px", "voxel": "px",
}


def normalise_unit(unit):
    """Return the canonical spelling of a length unit (``"micron"`` -> ``"um"``).

    Unknown units are kept as given (stripped), so that nothing is silently
    converted.
    """
    if unit is None:
        return "um"
    text = str(unit).strip()
    return _UNIT_ALIASES.get(text.lower(), text) if text else "um"


def validate_spacing(spacing, ndim):
    """Check a voxel size and return it as a tuple of ``ndim`` floats.

    A scalar means isotropic voxels.

    Raises
    ------
    SpacingError
        If the spacing has the wrong length or a value that is not a finite,
        positive number.
    """
    try:
        values = np.atleast_1d(np.asarray(spacing, dtype=float))
    except (TypeError, ValueError):
        raise SpacingError(f"spacing {spacing!r} is not a number or a list of numbers") from None
    if values.ndim != 1:
        raise SpacingError(f"spacing must be a number or a flat list, got shape {values.shape}")
    if values.size == 1:
        values = np.repeat(values, ndim)
    if values.size != ndim:
        raise SpacingError(
            f"spacing has {values.size} values but the image has {ndim} axes; "
            f"give one value per axis in (z, y, x) order or a single value")
    if not np.all(np.isfinite(values)) or np.any(values <= 0):
        raise SpacingError(f"spacing must be finite and positive, got {tuple(values.tolist())}")
    lo, hi = SPACING_RANGE
    if np.any(values < lo) or np.any(values > hi):
        raise SpacingError(f"spacing {tuple(values.tolist())} is outside {lo:g}..{hi:g}; "
                           "give it in a length unit that suits the image (--unit)")
    if values.max() / values.min() > 1e6:
        raise SpacingError(f"spacing {tuple(values.tolist())} differs by more than 10^6 "
                           "between axes; check the voxel size")
    return tuple(float(v) for v in values)


def estimate_memory(shape):
    """Estimated peak working memory in bytes to analyse a volume of ``shape``."""
    return int(np.prod(np.asarray(shape, dtype=np.float64)) * _BYTES_PER_VOXEL)


def _available_memory():
    """Memory available to a new allocation (MemAvailable), else the total."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):  # not on every platform
        return None


def check_declared_size(shape, dtype, source):
    """Refuse an image whose declared shape would not fit in memory, before
    decoding it (the header is enough)."""
    voxels = float(np.prod(np.asarray(shape, dtype=np.float64)))
    raw = voxels * np.dtype(dtype).itemsize
    need = max(raw, voxels * _BYTES_PER_VOXEL)
    have = _available_memory()
    if voxels > _MAX_VOXELS:
        raise InputError(f"{source} declares {tuple(shape)} = {voxels:.3g} voxels, more than "
                         f"skelmorph handles ({_MAX_VOXELS:.3g}); crop or downsample it")
    if have is not None and need > have:
        raise InputError(f"{source} declares an image of {tuple(shape)} {np.dtype(dtype)}: "
                         f"analysing it needs about {need / 2**30:.1f} GiB, and "
                         f"{have / 2**30:.1f} GiB is available; crop or downsample it")


def check_image_array(array, *, allow_color=False):
    """Check that ``array`` is a usable 2D or 3D image and return it as an ndarray.

    Raises
    ------
    InputError
        For 1D or 4D+ arrays, colour images (unless ``allow_color``), non-numeric
        data, NaN or infinite values, empty arrays and volumes too large for
        this machine's memory.
    """
    array = np.asarray(array) if not isinstance(array, np.ndarray) else array
    if array.dtype.kind not in "biuf":
        raise InputError(f"image data must be numeric or boolean, got dtype {array.dtype}")
    if array.size == 0:
        raise InputError(f"image is empty (shape {array.shape})")
    if array.ndim not in (2, 3):
        hint = ""
        if array.ndim == 4 and array.shape[-1] in (3, 4):
            hint = " (it looks like a colour volume: pick one channel first)"
        raise InputError(f"expected a 2D or 3D image, got {array.ndim} dimensions {array.shape}{hint}")
    if array.ndim == 3 and array.shape[-1] in (3, 4) and min(array.shape[:2]) > 4 and not allow_color:
        raise InputError(
            f"image of shape {array.shape} looks like a colour (RGB/RGBA) picture; pick a channel "
            f"(read_image(..., channel=1) or --channel 1) or convert it to grey first")
    if array.size > _MAX_VOXELS:
        raise InputError(f"image of shape {array.shape} has {array.size:.3g} voxels, more than "
                         f"skelmorph handles ({_MAX_VOXELS:.3g}); crop or downsample it")
    need, have = estimate_memory(array.shape), _available_memory()
    if have is not None and need > have:
        raise InputError(
            f"image of shape {array.shape} needs about {need / 2**30:.1f} GiB of working memory "
            f"but this machine has {have / 2**30:.1f} GiB; crop it or analyse it in blocks")
    if array.dtype.kind == "f" and not np.all(np.isfinite(array)):
        raise InputError("image contains NaN or infinite values; replace them (e.g. with 0) first")
    return array


def _natural_key(name):
    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", name)]


def _pick_channel(array, channel, source):
    """Reduce an RGB(A) image ``(..., 3|4)`` to one channel or to grey."""
    if channel is None:
        raise ImageReadError(
            f"{source} is a colour image; choose a channel (channel=0/1/2 or --channel 0/1/2, "
            f"e.g. 1 = green for fundus photographs) or channel='grey'")
    if channel == "grey":
        weights = np.array([0.2125, 0.7154, 0.0721])  # ITU-R BT.709 luminance
        return array[..., :3].astype(np.float32) @ weights.astype(np.float32)
    try:
        return array[..., int(channel)]
    except (IndexError, ValueError):
        raise ImageReadError(f"channel {channel!r} does not exist in {source} "
                             f"({array.shape[-1]} channels)") from None


def _description_metadata(tif):
    """Voxel-size hints from the first page's description.

    Two common forms: a JSON object (as tifffile writes) and ``key=value``
    lines (a widespread microscopy convention: ``unit=micron``,
    ``spacing=2.0`` for the slice distance).
    """
    desc = tif.pages[0].description or ""
    desc = desc.strip()
    if desc.startswith("{"):
        try:
            meta = json.loads(desc)
            return meta if isinstance(meta, dict) else {}
        except ValueError:
            return {}
    meta = {}
    for line in desc.splitlines():
        key, sep, value = line.partition("=")
        if sep:
            meta[key.strip().lower()] = value.strip()
    return meta


def _tiff_spacing(tif):
    """Voxel size and unit from TIFF tags and the page description.

    Returns ``(yx or None, z or None, unit or None)``.
    """
    page = tif.pages[0]
    tags = page.tags
    desc = _description_metadata(tif)
    unit = desc.get("unit")
    yx = None
    xres, yres = tags.get("XResolution"), tags.get("YResolution")
    res_unit = tags.get("ResolutionUnit")
    res_unit = int(res_unit.value) if res_unit is not None else 1
    if xres is not None and yres is not None:
        def per_unit(tag):
            num, den = tag.value if isinstance(tag.value, tuple) else (tag.value, 1)
            return num / den if den else 0.0
        px, py = per_unit(xres), per_unit(yres)
        if px > 0 and py > 0:
            if unit is not None and normalise_unit(unit) != "px":
                yx = (1.0 / py, 1.0 / px)
            elif res_unit == 3:  # centimetre
                yx, unit = (1e4 / py, 1e4 / px), "um"
            elif res_unit == 2 and px not in (72.0, 96.0):  # inch; 72/96 dpi are screen defaults
                yx, unit = (25400.0 / py, 25400.0 / px), "um"
    z = desc.get("spacing")
    try:
        z = float(z) if z is not None else None
    except (TypeError, ValueError):
        z = None
    return yx, z, unit


class _LogCollector:
    """Collects tifffile's log warnings, which is how it reports damaged files."""

    def __init__(self):
        import logging

        self.messages = []
        self.logger = logging.getLogger("tifffile")
        self.handler = logging.Handler(level=logging.WARNING)
        self.handler.emit = lambda record: self.messages.append(record.getMessage())

    def __enter__(self):
        self.logger.addHandler(self.handler)
        return self

    def __exit__(self, *exc):
        self.logger.removeHandler(self.handler)


class _TiffHeader(NamedTuple):
    shape: tuple
    dtype: np.dtype
    spacing: tuple  # (z, y, x), z None when only the plane is calibrated; or None
    unit: str
    is_rgb: bool
    dataoffset: int  # None unless the image data is one contiguous block


def _tiff_header(path):
    """What a TIFF declares (shape, type, voxel size, colour, data offset),
    read from its header only; a damaged header is an ImageReadError."""
    import tifffile

    try:
        with _LogCollector() as log, tifffile.TiffFile(path) as tif:
            series = tif.series[0]
            yx, z, unit = _tiff_spacing(tif)
            photometric = getattr(tif.pages[0], "photometric", None)
            header = _TiffHeader(tuple(series.shape), np.dtype(series.dtype),
                                 (z,) + yx if yx is not None else None, unit,
                                 photometric is not None and int(photometric) == 2,
                                 series.dataoffset)
    except Exception as exc:  # noqa: BLE001 - tifffile raises many kinds
        raise ImageReadError(f"cannot read TIFF {path}: {exc.__class__.__name__}: {exc}. "
                             f"The file may be truncated or not a TIFF.") from None
    damaged = [m for m in log.messages if "invalid" in m or "corrupt" in m or "truncat" in m]
    if damaged:
        raise ImageReadError(f"TIFF {path} is damaged or truncated ({damaged[0]})")
    return header


def _npy_header(path):
    """(shape, fortran_order, dtype, data offset) of a .npy file, from its header."""
    try:
        with open(path, "rb") as fh:
            version = np.lib.format.read_magic(fh)
            read_header = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                           else np.lib.format.read_array_header_2_0)
            shape, fortran, dtype = read_header(fh)
            return shape, fortran, dtype, fh.tell()
    except Exception as exc:  # noqa: BLE001
        raise ImageReadError(f"cannot read {path} as a .npy array: {exc}") from None


def _check_data_length(path, offset, shape, dtype, what):
    """Refuse a file shorter than the data its header declares."""
    need = int(offset) + int(np.prod(shape, dtype=np.float64)) * np.dtype(dtype).itemsize
    size = os.path.getsize(path)
    if need > size:
        raise ImageReadError(f"{what} {path} is truncated: its image data needs {need} bytes "
                             f"but the file has {size}")


def _read_tiff(path):
    import tifffile

    h = _tiff_header(path)
    check_declared_size(h.shape, h.dtype, f"TIFF {path}")
    contiguous = h.dataoffset is not None
    if contiguous:
        _check_data_length(path, h.dataoffset, h.shape, h.dtype, "TIFF")
    try:
        array = None
        if contiguous and not h.is_rgb:
            # Large uncompressed volumes are memory-mapped instead of loaded.
            try:
                array = tifffile.memmap(path, mode="r")
                if array.shape != h.shape:
                    array = None
            except Exception:  # noqa: BLE001 - fall back to a normal read
                array = None
        if array is None:
            array = tifffile.imread(path)
    except Exception as exc:  # noqa: BLE001 - tifffile raises many kinds
        raise ImageReadError(f"cannot read TIFF {path}: {exc.__class__.__name__}: {exc}. "
                             f"The file may be truncated or not a TIFF.") from None
    # read_image keeps the last ndim entries of the spacing, so a 2D image uses (y, x) only.
    return array, h.spacing, h.unit, h.is_rgb


def _plain_header(path):
    """Declared (shape, dtype) of a PNG/JPEG/BMP/GIF from its header, or None."""
    try:
        from PIL import Image
        Image.MAX_IMAGE_PIXELS = None  # the size check below is ours
        with Image.open(path) as im:
            bands = len(im.getbands())
            shape = (im.size[1], im.size[0]) + ((bands,) if bands > 1 else ())
            dtype = np.uint16 if im.mode.startswith("I;16") else (
                np.int32 if im.mode in ("I", "F") else np.uint8)
            return shape, dtype
    except Exception:  # noqa: BLE001 - imageio gives the reason below
        return None


def _read_plain(path):
    header = _plain_header(path)
    if header is not None:
        check_declared_size(*header, f"image {path}")
    try:
        import imageio.v3 as iio
        array = iio.imread(path)
    except Exception as exc:  # noqa: BLE001
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
        raise ImageReadError(f"cannot read image {path}: it is empty, damaged or not an image "
                             f"({exc.__class__.__name__}{': ' + first if first else ''})") from None
    return array, None, None, array.ndim == 3 and array.shape[-1] in (3, 4)


def _read_folder(path):
    files = sorted((p for p in path.iterdir() if p.suffix.lower() in IMAGE_SUFFIXES),
                   key=lambda p: _natural_key(p.name))
    if not files:
        raise ImageReadError(f"folder {path} holds no image slices ({', '.join(sorted(IMAGE_SUFFIXES))})")
    first, spacing, unit, is_rgb = _read_file(files[0])
    if first.ndim != 2 and not (is_rgb and first.ndim == 3):
        raise ImageReadError(f"slice {files[0].name} is not a 2D image (shape {first.shape})")
    check_declared_size((len(files),) + first.shape, first.dtype, f"folder {path}")
    stack = np.empty((len(files),) + first.shape, dtype=first.dtype)
    stack[0] = first
    for i, f in enumerate(files[1:], start=1):  # one file per slice, not a per-voxel loop
        sl = _read_file(f)[0]
        if sl.shape != first.shape:
            raise ImageReadError(f"slice {f.name} has shape {sl.shape}, unlike {files[0].name} "
                                 f"{first.shape}; all slices must have the same size")
        stack[i] = sl
    if spacing is not None:
        spacing = (None,) + tuple(spacing[-2:])
    return stack, spacing, unit, is_rgb


def _read_file(path):
    suffix = path.suffix.lower()
    if suffix in _TIFF_SUFFIXES:
        return _read_tiff(path)
    if suffix == ".npy":
        shape, _, dtype, _ = _npy_header(path)  # the header first: refuse before mapping
        check_declared_size(shape, dtype, f"array {path}")
        try:
            array = np.load(path, mmap_mode="r", allow_pickle=False)
            return array, None, None, False
        except InputError:
            raise
        except Exception as exc:  # noqa: BLE001
            raise ImageReadError(f"cannot read {path} as a .npy array: {exc}") from None
    if suffix in IMAGE_SUFFIXES:
        return _read_plain(path)
    raise ImageReadError(f"unknown image type {suffix!r} for {path}; use a TIFF, PNG, JPEG, "
                         f".npy file or a folder of 2D slices")


def read_image(path, spacing=None, unit=None, channel=None):
    """Read a 2D or 3D image and its voxel size.

    Supported: multi-page TIFF (3D) and single-page TIFF, PNG, JPEG (2D);
    ``.npy`` arrays; a folder of 2D slices, stacked in natural sort order
    (``slice2`` before ``slice10``); an OME-Zarr store (its finest level,
    see :mod:`skelmorph.volume`). Uncompressed TIFF and ``.npy`` files are
    memory-mapped rather than loaded.

    Parameters
    ----------
    path : str or Path
        File or folder.
    spacing : float or sequence of float, optional
        Voxel size per axis, ``(z, y, x)`` order.  Overrides the file's
        metadata (a warning is given when they disagree).  Without it the
        file's metadata is used (TIFF resolution tags and a ``spacing``/``unit``
        page description), and failing that 1 per axis with a
        warning.
    unit : str, optional
        Length unit of ``spacing``; default ``"um"`` unless the file says otherwise.
    channel : int or "grey", optional
        For colour images: the channel to keep, or ``"grey"`` for luminance.

    Returns
    -------
    ImageData
        ``(array, spacing, unit)``; unpack it as ``array, spacing, unit = read_image(p)``.

    Raises
    ------
    ImageReadError
        Missing, unreadable, truncated or unsupported files; colour images
        without ``channel``.
    InputError, SpacingError
        Unusable image data or voxel size.
    """
    path = Path(path)
    try:
        if not path.exists():
            raise ImageReadError(f"no such file or folder: {path}")
        regular = path.is_dir() or path.is_file()
    except OSError as exc:  # a symlink loop, a name too long
        raise ImageReadError(f"cannot open {path}: {exc.strerror or exc}") from None
    if not regular:
        raise ImageReadError(f"{path} is not a regular file or folder (a device or a pipe?)")
    from .volume import is_zarr_store
    if is_zarr_store(path):  # read whole; large stores go through skelmorph.volume
        from .volume import open_volume
        vol = open_volume(path, spacing, unit)
        check_declared_size(vol.shape, vol.dtype, f"OME-Zarr {path}")
        return ImageData(check_image_array(vol.planes(0, vol.shape[0])), vol.spacing, vol.unit)
    try:
        array, file_spacing, file_unit, is_rgb = (_read_folder(path) if path.is_dir() else _read_file(path))
    except PermissionError:
        raise ImageReadError(f"permission denied reading {path}") from None
    except OSError as exc:
        raise ImageReadError(f"cannot read {path}: {exc}") from None
    source = str(path)
    if is_rgb or (channel is not None and array.ndim >= 3 and array.shape[-1] in (3, 4)):
        array = _pick_channel(array, channel, source)
    while array.ndim > 3 and array.shape[0] == 1:  # hyperstack axes of length 1
        array = array[0]
    while array.ndim > 3 and array.shape[-1] == 1:
        array = array[..., 0]
    array = check_image_array(array)
    spacing, unit = resolve_spacing(file_spacing, file_unit, spacing, unit, array.ndim, source)
    return ImageData(array, spacing, unit)


def resolve_spacing(file_spacing, file_unit, spacing, unit, ndim, source):
    """The voxel size and unit to use: the caller's, else the file's, else 1.

    ``file_spacing`` may hold ``None`` for an axis the file does not
    calibrate (the slice distance of many TIFF stacks); it is then taken
    equal to the x size, with a warning.  Returns ``(spacing, unit)``.
    """
    if file_spacing is not None:
        file_spacing = tuple(file_spacing)[-ndim:]
    if spacing is not None:
        spacing = validate_spacing(spacing, ndim)
        if file_spacing is not None and None not in file_spacing and not np.allclose(
                spacing, file_spacing, rtol=1e-3):
            warnings.warn(f"{source}: spacing {spacing} given; the file says {file_spacing} "
                          f"{normalise_unit(file_unit)}; using the given spacing", stacklevel=3)
        return spacing, normalise_unit(unit if unit is not None else file_unit)
    if file_spacing is not None and None not in file_spacing:
        return validate_spacing(file_spacing, ndim), normalise_unit(unit or file_unit)
    if file_spacing is not None and None in file_spacing:
        warnings.warn(f"{source}: the file gives the in-plane pixel size but not the slice "
                      f"spacing; assuming it equals the in-plane x size. Give spacing to be sure.",
                      stacklevel=3)
        filled = tuple(file_spacing[-1] if s is None else s for s in file_spacing)
        return validate_spacing(filled, ndim), normalise_unit(unit or file_unit)
    warnings.warn(f"{source}: no voxel size in the file and none given; using 1 {normalise_unit(unit)} "
                  f"per voxel. Give spacing (--spacing) for physical units.", stacklevel=3)
    return (1.0,) * ndim, normalise_unit(unit)


# --------------------------------------------------------------------------- writing

def _current_umask():
    """The process's umask: from /proc where there is one (no race with other
    threads), else by setting it and putting it back."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except OSError:
        pass
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it over ``path`` on success.

    A reader never sees a half-written file, and a crash leaves the old file
    (or none) in place.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    # mkstemp creates the file private (0600); give it the mode a plain open()
    # would, so outputs respect the process's umask.
    os.chmod(fd, 0o666 & ~_current_umask())
    os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


@contextlib.contextmanager
def atomic_write(path, mode="w", **kwargs):
    """Open a file for writing that appears at ``path`` only once complete."""
    with atomic_path(path) as tmp, open(tmp, mode, **kwargs) as fh:
        yield fh
        fh.flush()
        os.fsync(fh.fileno())


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not np.isfinite(obj):
        return None  # JSON has no NaN/inf
    return obj


def write_json(path, data):
    """Write ``data`` as indented JSON, atomically; NaN and inf become null."""
    with atomic_write(path, "w", encoding="utf-8") as fh:
        json.dump(_jsonable(data), fh, indent=2, allow_nan=False)
        fh.write("\n")


def format_numbers(values, fmt="%.6g"):
    """Format a 1D numeric array as a list of strings in one C-level pass.

    Much faster than formatting element by element for large tables and
    polylines.
    """
    values = np.asarray(values).ravel().tolist()
    if not values:
        return []
    return ((fmt + "\n") * len(values) % tuple(values)).split("\n")[:-1]


_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def safe_cell(value):
    """A CSV cell that a spreadsheet will not run as a formula: text starting
    with ``= + - @`` (or a tab or carriage return) gets a leading apostrophe
    (the OWASP advice on CSV injection); numbers are unchanged."""
    if not isinstance(value, str) or not value.startswith(_FORMULA_START):
        return value
    try:
        float(value)
        return value  # a number such as -1.5
    except ValueError:
        return "'" + value


def write_csv(path, columns):
    """Write a table given as ``{name: 1D array}`` to CSV, atomically.

    Floats are written with 6 significant digits; NaN as an empty field.
    """
    names = list(columns)
    cols = [np.asarray(columns[n]) for n in names]
    n = len(cols[0]) if cols else 0
    if any(len(c) != n for c in cols):
        raise ValueError("all columns must have the same length")
    with atomic_write(path, "w", encoding="utf-8", newline="") as fh:
        # The csv module quotes fields that hold commas or quotes (messages, paths).
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(names)
        # Blocks of rows: the text of a whole table of millions of branches
        # as Python strings would take gigabytes.
        for a in range(0, n, CSV_BLOCK_ROWS):
            text_cols = [_csv_cells(c[a:a + CSV_BLOCK_ROWS]) for c in cols]
            rows = np.stack(text_cols, axis=1) if text_cols else \
                np.empty((min(n - a, CSV_BLOCK_ROWS), 0), object)
            writer.writerows(rows.tolist())


#: Rows formatted at a time by :func:`write_csv`.
CSV_BLOCK_ROWS = 1 << 16


def _csv_cells(c):
    """The CSV cells of one column (an object array of strings)."""
    if c.dtype.kind == "f":
        s = np.array(format_numbers(c), dtype=object)
        s[~np.isfinite(c)] = ""
        return s
    if c.dtype.kind in "USO":
        text = c.astype(str)
        cells = text.astype(object)
        risky = np.zeros(len(text), bool)
        for start in _FORMULA_START:
            risky |= np.char.startswith(text, start)
        for i in np.flatnonzero(risky):  # only the few risky cells
            cells[i] = safe_cell(cells[i])
        return cells
    return c.astype(str).astype(object)


def write_tiff(path, array, spacing, unit="um"):
    """Write a 2D/3D image as TIFF with its voxel size, atomically.

    The voxel size goes into the resolution tags and a JSON page description
    (``spacing`` for z, ``unit``), which :func:`read_image` reads back.
    Boolean masks are written as 0/255 uint8.
    """
    import tifffile

    array = np.asarray(array)
    if array.dtype == bool:
        array = array.astype(np.uint8) * 255
    spacing = validate_spacing(spacing, array.ndim)
    unit = normalise_unit(unit)
    meta = {"unit": unit}
    if array.ndim == 3:
        meta["spacing"] = spacing[0]
    with atomic_path(path) as tmp:
        tifffile.imwrite(tmp, array, photometric="minisblack",
                         resolution=(1.0 / spacing[-1], 1.0 / spacing[-2]),
                         metadata=meta)
