"""The options of :func:`skelmorph.analyze`: their types and limits, checked
before any work starts (options files, cohort runs and direct calls alike)."""

from __future__ import annotations

import functools
import math
import numbers

from .errors import InputError

__all__ = ["analyze_schema", "validate_options", "estimate_descriptor_seconds", "MAX_PATHS"]

#: Default limit on the estimated number of simple paths (``paths``).
MAX_PATHS = 20_000_000

# Measured on the 2-core reference machine (scripts/bench.py): seconds per
# tree per centreline point, per radius per point, and per path.
_TREE_SECONDS_PER_POINT = 1e-6
_RADIUS_SECONDS_PER_POINT = 1.5e-9
_PATH_SECONDS = 2e-7
# Bytes a kept spanning tree and its barcode take per centreline point.
_TREE_BYTES_PER_POINT = 96


def _is_number(v):
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def _is_int(v):
    return isinstance(v, numbers.Integral) and not isinstance(v, bool)


def _number(lo=-math.inf, hi=math.inf, none=True, inf=False):
    def check(v):
        if v is None:
            return None if none else "a number is required"
        if not _is_number(v) or (math.isnan(v)) or (math.isinf(v) and not inf):
            return f"must be a number, not {v!r}"
        if not lo <= v <= hi:
            return f"must be between {lo:g} and {hi:g}, not {v!r}"
        return None
    return check


def _integer(lo, hi, none=True):
    def check(v):
        if v is None:
            return None if none else "an integer is required"
        if not _is_int(v):
            return f"must be an integer, not {v!r}"
        if not lo <= v <= hi:
            return f"must be between {lo} and {hi}, not {v!r}"
        return None
    return check


def _boolean(v):
    return None if isinstance(v, bool) else f"must be true or false, not {v!r}"


def _choice(*values, none=False):
    def check(v):
        if v is None and none:
            return None
        return None if v in values else f"must be one of {', '.join(map(str, values))}, not {v!r}"
    return check


def _numbers(count, positive=False):
    def check(v):
        if v is None:
            return None
        if not isinstance(v, (list, tuple)) or len(v) != count or not all(map(_is_number, v)):
            return f"must be {count} numbers, not {v!r}"
        if positive and not all(x > 0 for x in v):
            return f"must be positive, not {v!r}"
        return None
    return check


def _channel(v):
    if v is None or v == "grey" or (_is_int(v) and 0 <= v <= 3):
        return None
    return f"must be 0, 1, 2, 3 or 'grey', not {v!r}"


def _hysteresis(v):
    if v is None or v == "auto":
        return None
    return _numbers(2)(v)


def _roi(v):
    return None if v is None or isinstance(v, str) else f"must be a path or 'auto', not {v!r}"


def _measures(v):
    if v is None:
        return None
    names = [v] if isinstance(v, str) else v
    allowed = ("bone", "vessel", "venation", "all", "none")
    if not isinstance(names, (list, tuple)):
        return f"must be a name or a list of names, not {v!r}"
    bad = [n for n in names if n not in allowed]
    if bad:
        return f"has an unknown measure set {bad[0]!r}; choose from bone, vessel, venation or all"
    return None


@functools.lru_cache(maxsize=None)
def analyze_schema():
    """Option name -> checker returning None or the reason a value is wrong."""
    from .descriptors.barcode import FILTRATIONS
    from .rooting import ROOT_METHODS, TREE_METHODS
    faces = tuple(a + s for a in "zyx" for s in "-+")
    return {
        "channel": _channel, "threshold": _number(), "dark": _boolean,
        "min_object_size": _number(0), "max_hole_size": _number(0, inf=True),
        "smooth": _number(0), "enhance": _choice("vessels", none=True),
        "scales": _numbers(2, positive=True), "hysteresis": _hysteresis, "roi": _roi,
        "label": _integer(-2**63, 2**63 - 1), "prune": _boolean, "prune_factor": _number(0),
        "min_branch_length": _number(0, none=False), "extend_tips": _boolean,
        "smoothing": _number(0, 100, none=False), "merge_junctions": _boolean,
        "thinning": _choice("ordered", "lee", "zhang"), "root": _choice(*ROOT_METHODS),
        "tree": _choice(*TREE_METHODS, none=True), "n_trees": _integer(1, 100_000, none=False),
        "filtration": _choice(*FILTRATIONS), "seed": _integer(0, 2**32 - 1, none=False),
        "root_point": lambda v: None if v is None else (
            None if isinstance(v, (list, tuple)) and len(v) in (2, 3) and all(map(_is_number, v))
            else f"must be 2 or 3 numbers, not {v!r}"),
        "root_face": _choice(*faces, none=True), "n_radii": _integer(0, 1_000_000, none=False),
        "paths": _integer(0, 64), "measures": _measures, "thickness_map": _boolean,
        "figures": _boolean, "work_limit": _number(0, inf=True),
        "max_paths": _integer(0, 10**15),
    }


def validate_options(options, where="options"):
    """Check every option at once; raise one line listing each problem.

    Unknown names and wrong types or ranges are errors.  Returns the options.
    """
    schema = analyze_schema()
    problems = []
    for name, value in options.items():
        check = schema.get(name)
        if check is None:
            problems.append(f"unknown option {name!r} (allowed: {', '.join(sorted(schema))})")
            continue
        why = check(value)
        if why:
            problems.append(f"{name} {why}")
    if problems:
        raise InputError(f"{where}: " + "; ".join(problems))
    return options


def estimate_descriptor_seconds(graph, n_trees=1, n_radii=0, paths=None):
    """Rough seconds for the tree descriptors, radial profiles and path counts
    of ``graph`` (rates measured on the reference machine), and the
    estimated number of simple paths.

    The number of simple paths of at most k branches is close to
    E (1 + b + ... + b^(k-1)), with b = sum d(d-1) / sum d the
    non-backtracking branching factor of the degree sequence (within 20 %
    on foam graphs, scripts/bench.py).
    """
    import numpy as np
    points = max(len(graph.points), 1)
    out = {"trees": n_trees * points * _TREE_SECONDS_PER_POINT,
           "tree_bytes": n_trees * points * _TREE_BYTES_PER_POINT,
           "radii": n_radii * points * _RADIUS_SECONDS_PER_POINT, "paths": 0.0, "n_paths": 0.0}
    if paths:
        deg = np.bincount(graph.edges.ravel(), minlength=graph.n_nodes).astype(float)
        b = float((deg * (deg - 1)).sum() / max(deg.sum(), 1.0))
        n = graph.n_edges * sum(b ** j for j in range(int(paths)))
        out["n_paths"] = n
        out["paths"] = n * _PATH_SECONDS
    return out
