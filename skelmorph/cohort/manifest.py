"""The study manifest: one CSV row per sample, validated all at once.

Columns (header names are case-insensitive):

``sample``
    A unique identifier (letters, digits, ``-``, ``_``, ``.``); it names the
    sample's output folder.
``path``
    The image file or folder of slices, absolute or relative to the
    manifest's folder.
``group`` (optional)
    The sample's group (treatment, species, age...).
``spacing`` (optional)
    Voxel size as one value or ``z y x`` / ``y x`` separated by spaces;
    empty means "from the file".
``unit`` (optional)
    Length unit of ``spacing`` (default um).
``roi`` (optional)
    The sample's region of interest: a mask image (path as for ``path``) or
    ``auto`` (see :mod:`skelmorph.roi`); empty means the options' ROI, or
    the whole image.

Other columns are kept as sample metadata.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import SkelmorphError

__all__ = ["Sample", "ManifestError", "read_manifest"]

_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


class ManifestError(SkelmorphError):
    """The manifest has problems; the message lists every bad row."""


@dataclass(frozen=True)
class Sample:
    sample: str
    path: Path
    group: str = ""
    spacing: tuple | None = None
    unit: str | None = None
    meta: dict = field(default_factory=dict)
    roi: object = None


def _parse_spacing(text):
    text = (text or "").strip()
    if not text:
        return None
    parts = text.replace(",", " ").split()
    values = tuple(float(p) for p in parts)
    if len(values) not in (1, 2, 3) or not all(v > 0 and v < float("inf") for v in values):
        raise ValueError(text)
    return values if len(values) > 1 else values[0]


def read_manifest(path):
    """Read and validate a manifest CSV.

    Returns
    -------
    list of Sample

    Raises
    ------
    ManifestError
        Listing every problem found: missing columns, empty or duplicate
        sample ids, bad ids, missing files, bad voxel sizes.
    """
    path = Path(path)
    if not path.is_file():
        raise ManifestError(f"manifest {path} does not exist")
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            reader = csv.DictReader(fh)
            header = [h.strip().lower() for h in (reader.fieldnames or [])]
            dupes = sorted({h for h in header if header.count(h) > 1})
            if dupes:
                raise ManifestError(f"manifest {path} has the column {dupes[0]!r} twice (column "
                                    "names are case-insensitive); rename one")
            raw = list(reader)
    except (UnicodeDecodeError, csv.Error) as exc:
        raise ManifestError(f"manifest {path} is not a readable CSV file: {exc}") from None
    except OSError as exc:
        raise ManifestError(f"cannot read manifest {path}: {exc.strerror or exc}") from None
    long_rows = [i for i, row in enumerate(raw, start=2) if None in row]
    if long_rows:
        raise ManifestError(f"manifest {path}: line {long_rows[0]} has more fields than the "
                            f"header ({len(header)} columns); quote values that hold commas")
    rows = [{(k or "").strip().lower(): (v or "").strip() for k, v in row.items()} for row in raw]
    missing = [c for c in ("sample", "path") if c not in header]
    if missing:
        raise ManifestError(f"manifest {path} lacks the column(s) {', '.join(missing)}; "
                            f"it needs at least 'sample' and 'path' (found: {', '.join(header)})")
    if not rows:
        raise ManifestError(f"manifest {path} has no samples")
    problems, samples, seen, folded = [], [], {}, {}
    for line, row in enumerate(rows, start=2):
        sid = row.get("sample", "")
        where = f"line {line}"
        if not sid:
            problems.append(f"{where}: empty sample id")
            continue
        if not _ID.match(sid):
            problems.append(f"{where}: sample id {sid!r} may only use letters, digits, '.', '-', '_'")
        if sid in seen:
            problems.append(f"{where}: duplicate sample id {sid!r} (first on line {seen[sid]})")
        elif sid.lower() in folded:
            first = folded[sid.lower()]
            problems.append(f"{where}: sample id {sid!r} differs from {first[0]!r} (line "
                            f"{first[1]}) only in case; their folders would collide")
        seen.setdefault(sid, line)
        folded.setdefault(sid.lower(), (sid, line))
        p = Path(row.get("path", ""))
        if not row.get("path"):
            problems.append(f"{where}: sample {sid!r} has no path")
        else:
            try:
                if not p.is_absolute():
                    p = (path.parent / p).resolve()
                if not p.exists():
                    problems.append(f"{where}: sample {sid!r}: file {p} does not exist")
            except (OSError, RuntimeError) as exc:  # a symlink loop
                problems.append(f"{where}: sample {sid!r}: cannot open {p} "
                                f"({getattr(exc, 'strerror', None) or exc})")
        try:
            spacing = _parse_spacing(row.get("spacing"))
        except ValueError:
            problems.append(f"{where}: sample {sid!r}: bad spacing {row.get('spacing')!r} "
                            "(one or 2-3 positive numbers separated by spaces)")
            spacing = None
        roi = row.get("roi") or None
        if roi is not None and roi.lower() == "auto":
            roi = "auto"
        elif roi is not None:
            roi = Path(roi)
            if not roi.is_absolute():
                roi = (path.parent / roi).resolve()
            if not roi.exists():
                problems.append(f"{where}: sample {sid!r}: ROI file {roi} does not exist")
        meta = {k: v for k, v in row.items()
                if k not in ("sample", "path", "group", "spacing", "unit", "roi")}
        samples.append(Sample(sid, p, row.get("group", ""), spacing, row.get("unit") or None, meta,
                              roi))
    if problems:
        raise ManifestError(f"manifest {path} has {len(problems)} problem(s): "
                            + "; ".join(problems))
    return samples
