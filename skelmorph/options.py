"""The options of :func:`skelmorph.analyze`, defined once: name, default,
check, help, unit and command-line settings.  The CLI flags, the TOML keys
and the checks of options files, cohort runs and direct calls are all
generated from :data:`ANALYZE_OPTIONS`, so one option has one name
everywhere."""

from __future__ import annotations

import functools
import math
import numbers
from dataclasses import dataclass, field
from typing import Any, Callable

from .errors import InputError

__all__ = ["Option", "ANALYZE_OPTIONS", "analyze_schema", "add_analyze_arguments",
           "options_from_cli", "validate_options", "estimate_descriptor_seconds", "MAX_PATHS"]

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
    allowed = ("bone", "vessel", "venation", "cortical", "all", "none")
    if not isinstance(names, (list, tuple)):
        return f"must be a name or a list of names, not {v!r}"
    bad = [n for n in names if n not in allowed]
    if bad:
        return (f"has an unknown measure set {bad[0]!r}; choose from bone, vessel, venation, "
                "cortical or all")
    return None


def _memory(v):
    if v is None:
        return None
    from .chunked import parse_memory
    try:
        parse_memory(v)
    except InputError as exc:
        return f"is not a size ({exc})"
    return None


@dataclass(frozen=True)
class Option:
    """One analysis option: the keyword of :func:`skelmorph.analyze`, the key
    of a TOML options file and of ``run.json``, and the command-line flag
    ``--<name with dashes>``, all generated from this one definition.

    ``cli`` holds the extra argparse settings (type, nargs, metavar,
    choices); booleans get ``--name`` / ``--no-name``.  ``unit`` names the
    kind of physical value ('length', 'length^d', 's') or is empty.
    """

    name: str
    default: Any
    check: Callable[[Any], Any]
    help: str
    group: str
    unit: str = ""
    cli: dict = field(default_factory=dict)

    @property
    def flag(self):
        return "--" + self.name.replace("_", "-")


# Allowed values that live in modules importing scipy: looked up on use, so
# that the check and the command-line choices read one list.
def _tree_methods():
    from .rooting import TREE_METHODS
    return [*TREE_METHODS, "none"]


def _root_methods():
    from .rooting import ROOT_METHODS
    return list(ROOT_METHODS)


def _filtrations():
    from .descriptors.barcode import FILTRATIONS
    return list(FILTRATIONS)


def _lazy_choice(values, none=False):
    return lambda v: _choice(*values(), none=none)(v)


def _root_point(v):
    if v is None or (isinstance(v, (list, tuple)) and len(v) in (2, 3)
                     and all(map(_is_number, v))):
        return None
    return f"must be 2 or 3 numbers, not {v!r}"


_FACES = tuple(a + s for a in "zyx" for s in "-+")
_SEG, _GRAPH, _MEAS, _TREE = ("segmentation (grey images)", "graph", "field measures",
                              "tree descriptors (largest component)")

#: Every option of :func:`skelmorph.analyze` except the image, its voxel size
#: and unit, the output folder and the progress bar.
ANALYZE_OPTIONS = (
    Option("channel", None, _channel, "colour images: channel index (0-3) or 'grey'", "input",
           cli={"metavar": "C"}),
    Option("roi", None, _roi, "region of interest: a mask image of the same shape, or 'auto' "
           "(the field of view of a grey image, the filled outline of a binary one); all "
           "measures use it as the reference volume (default: whole image)", "input",
           cli={"metavar": "FILE|auto"}),
    Option("threshold", None, _number(), "grey level threshold, or of the enhanced image "
           "(default: Otsu in the ROI)", _SEG, cli={"type": float}),
    Option("dark", False, _boolean, "the structure is darker than the background", _SEG),
    Option("label", None, _integer(-2**63, 2**63 - 1), "label images: keep the voxels of value "
           "N (label maps are not thresholded unasked)", _SEG, cli={"type": int, "metavar": "N"}),
    Option("smooth", None, _number(0), "Gaussian smoothing before thresholding, sigma",
           _SEG, "length", cli={"type": float, "metavar": "SIGMA"}),
    Option("enhance", None, _choice("vessels", none=True), "threshold a multi-scale line "
           "filter (Sato) instead of grey levels", _SEG, cli={"choices": ["vessels"]}),
    Option("scales", None, _numbers(2, positive=True), "with --enhance: smallest and largest "
           "filter scale (default 1 to 4 voxels)", _SEG, "length",
           cli={"type": float, "nargs": 2, "metavar": ("MIN", "MAX")}),
    Option("hysteresis", None, _hysteresis, "hysteresis thresholding: 'auto' or LOW HIGH",
           _SEG, cli={"nargs": "+", "metavar": "LEVEL"}),
    Option("min_object_size", None, _number(0), "remove specks up to this area/volume", _SEG,
           "length^d", cli={"type": float, "metavar": "SIZE"}),
    Option("max_hole_size", None, _number(0, inf=True), "fill enclosed holes up to this "
           "area/volume", _SEG, "length^d", cli={"type": float, "metavar": "SIZE"}),
    Option("thinning", "ordered", _choice("ordered", "lee", "zhang"), "thinning: ours, "
           "distance-ordered on the native voxel grid, or scikit-image's Lee (3D) / "
           "Zhang-Suen (2D) for comparison", _GRAPH, cli={"choices": ["ordered", "lee", "zhang"]}),
    Option("prune", True, _boolean, "prune spurs (tip branches shorter than the prune factor "
           "times their junction's radius)", _GRAPH),
    Option("prune_factor", 1.5, _number(0), "prune tip branches shorter than this times the "
           "junction radius", _GRAPH, cli={"type": float}),
    Option("min_branch_length", 0.0, _number(0, none=False), "also prune tip branches shorter "
           "than this", _GRAPH, "length", cli={"type": float}),
    Option("extend_tips", False, _boolean, "lengthen tip branches by their tip radius", _GRAPH),
    Option("smoothing", 2.0, _number(0, 100, none=False), "centreline smoothing before "
           "measuring length, voxels (0 = none)", _GRAPH, cli={"type": float}),
    Option("merge_junctions", True, _boolean, "contract branches of at most 3 voxels between "
           "junctions into one node", _GRAPH),
    Option("measures", None, _measures, "field measure sets: bone (3D), vessel, venation (2D), "
           "cortical (3D, bone along axis 0; never part of 'all'), all that apply, or none",
           _MEAS,
           cli={"nargs": "+", "choices": ["bone", "vessel", "venation", "cortical", "all",
                                          "none"]}),
    Option("thickness_map", False, _boolean, "bone: also write thickness.tif and "
           "separation.tif (diameters) and plate_rod.tif (1 plate, 2 rod)", _MEAS),
    Option("major_vein_width", None, _number(0), "venation: split VLA into major and minor "
           "veins at this vein width", _MEAS, "length", cli={"type": float, "metavar": "W"}),
    Option("root", "thickest", _lazy_choice(_root_methods), "root rule", _TREE,
           cli={"choices": _root_methods}),
    Option("root_point", None, _root_point, "with --root point: position in (z) y x order",
           _TREE, "length", cli={"type": float, "nargs": "+", "metavar": "C"}),
    Option("root_face", None, _choice(*_FACES, none=True), "with --root face: z-, z+, y-, y+, "
           "x- or x+ (default z-)", _TREE, cli={"choices": list(_FACES)}),
    Option("tree", "shortest", _lazy_choice(_tree_methods, none=True),
           "spanning tree rule ('none' skips the tree descriptors)", _TREE,
           cli={"choices": _tree_methods}),
    Option("n_trees", 1, _integer(1, 100_000, none=False), "with --tree random: number of "
           "random spanning trees; scalars become mean and spread", _TREE,
           cli={"type": int, "metavar": "N"}),
    Option("filtration", "radial", _lazy_choice(_filtrations), "barcode filtration", _TREE,
           cli={"choices": _filtrations}),
    Option("seed", 0, _integer(0, 2**32 - 1, none=False), "seed of random trees", _TREE,
           cli={"type": int}),
    Option("n_radii", 200, _integer(0, 1_000_000, none=False), "radii of the radial (Sholl-type) "
           "profiles around the root (0 = none)", _TREE, cli={"type": int, "metavar": "N"}),
    Option("paths", None, _integer(0, 64), "count simple paths up to K branches and write "
           "path-poset invariants to paths.json", _TREE, cli={"type": int, "metavar": "K"}),
    Option("work_limit", 900.0, _number(0, inf=True), "refuse tree descriptors, profiles and "
           "paths estimated to take longer", _TREE, "s",
           cli={"type": float, "metavar": "SECONDS"}),
    Option("max_paths", None, _integer(0, 10**15), "refuse --paths when the estimated number "
           "of paths exceeds N (default 2e7)", _TREE,
           cli={"type": lambda v: int(float(v)), "metavar": "N"}),
    Option("figures", True, _boolean, "write the per-sample figures (PNG)", "output"),
    Option("memory_limit", None, _memory, "3D scans larger than this in memory (e.g. 8GB, "
           "500MB) are analysed in slabs read from the file; default half the memory "
           "available", "large scans", cli={"metavar": "SIZE"}),
)


@functools.lru_cache(maxsize=None)
def analyze_schema():
    """Option name -> checker returning None or the reason a value is wrong."""
    return {o.name: o.check for o in ANALYZE_OPTIONS}


def add_analyze_arguments(parser):
    """Add one flag per analysis option to an argparse parser, grouped."""
    import argparse
    groups = {}
    for o in ANALYZE_OPTIONS:
        if o.group not in groups:
            groups[o.group] = parser.add_argument_group(o.group)
        unit = {"length": " (image unit)", "length^d": " (image unit^d)",
                "s": " (seconds)"}.get(o.unit, "")
        default = "" if o.default is None or isinstance(o.default, bool) else \
            f" (default {o.default})"
        cli = dict(o.cli)
        if callable(cli.get("choices")):
            cli["choices"] = list(cli["choices"]())
        if isinstance(o.default, bool):
            groups[o.group].add_argument(o.flag, dest=o.name, default=o.default,
                                         action=argparse.BooleanOptionalAction,
                                         help=o.help + unit)
        else:
            groups[o.group].add_argument(o.flag, dest=o.name, default=o.default,
                                         help=o.help + unit + default, **cli)
    return parser


def options_from_cli(args):
    """The analysis keywords from parsed command-line arguments (one name each)."""
    out = {o.name: getattr(args, o.name) for o in ANALYZE_OPTIONS}
    h = out["hysteresis"]
    if h is not None:
        if h == ["auto"]:
            out["hysteresis"] = "auto"
        else:
            try:
                out["hysteresis"] = tuple(float(v) for v in h)
            except ValueError:
                out["hysteresis"] = h
            if len(out["hysteresis"]) != 2 or isinstance(out["hysteresis"], list):
                raise InputError("--hysteresis takes 'auto' or two levels LOW HIGH, not "
                                 + " ".join(map(str, h)))
    c = out["channel"]
    if c is not None and c != "grey":
        try:
            out["channel"] = int(c)
        except ValueError:
            raise InputError(f"--channel must be an index or 'grey', not {c!r}") from None
    return out


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
