"""The results registry: every scalar that ``summary.json`` can hold, once,
with its kind, unit and a one-line description.

Measure sets compute values; this registry says what they are.  The
pipeline writes ``summary["units"]`` from it, casts counts to integers, and
tables, the command-line summary, the cohort comparison and the report read
descriptions and units here, so a new measure is added in one place.

Units are templates: ``{u}`` is the image's length unit and ``{d}`` the
dimension (2 or 3), so that ``{u}^{d}`` reads ``um^3`` for a 3D scan in
micrometres and ``mm^2`` for a 2D image in millimetres.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

__all__ = ["Measure", "MEASURES", "describe", "unit_of", "units_map", "cast_counts",
           "format_value", "PROCESSING_KEYS"]

#: Kinds of value; ``count`` values are stored as integers.
KINDS = ("count", "length", "area", "volume", "ratio", "density", "angle", "index",
         "identifier")


@dataclass(frozen=True)
class Measure:
    key: str
    kind: str
    unit: str
    description: str


def _m(key, kind, unit, description):
    return Measure(key, kind, unit, description)


_LIST = [
    # graph (skelmorph.measure.network)
    _m("total_length", "length", "{u}", "summed length of all branches (smoothed centrelines)"),
    _m("n_nodes", "count", "1", "nodes of the graph (junctions, tips, isolated points)"),
    _m("n_branches", "count", "1", "branches (edges between nodes, rings included)"),
    _m("n_junctions", "count", "1", "nodes of degree 3 or more"),
    _m("n_tips", "count", "1", "nodes of degree 1 (free ends)"),
    _m("n_isolated_points", "count", "1", "components reduced to one point"),
    _m("n_rings", "count", "1", "components that are a closed loop without junctions"),
    _m("n_components", "count", "1", "connected pieces of the network"),
    _m("cycle_rank", "count", "1", "independent loops of the network: branches - nodes + "
       "components (first Betti number)"),
    _m("mean_branch_length", "length", "{u}", "mean length of a branch"),
    _m("median_branch_length", "length", "{u}", "median length of a branch"),
    _m("mean_radius", "length", "{u}", "length-weighted mean radius of the centrelines"),
    _m("mean_tortuosity", "ratio", "1", "length-weighted mean of branch length over chord"),
    _m("volume_fraction", "ratio", "1", "share of the region of interest that is structure "
       "(area share in 2D)"),
    # bone (Bouxsein et al. 2010, J Bone Miner Res 25:1468)
    _m("BV/TV", "ratio", "1", "bone volume fraction: structure volume over the region's volume"),
    _m("BS/BV", "density", "{u}^-1", "bone surface over bone volume"),
    _m("BS/TV", "density", "{u}^-1", "bone surface over the region's volume"),
    _m("Tb.Th", "length", "{u}", "mean trabecular thickness (maximal spheres, Hildebrand & "
       "Ruegsegger 1997)"),
    _m("Tb.Th.SD", "length", "{u}", "standard deviation of the local thickness"),
    _m("Tb.Sp", "length", "{u}", "mean trabecular separation (maximal spheres in the space)"),
    _m("Tb.Sp.SD", "length", "{u}", "standard deviation of the local separation"),
    _m("Tb.N", "density", "{u}^-1", "trabecular number, 1 / (Tb.Th + Tb.Sp)"),
    _m("Conn.D", "density", "{u}^-3", "connectivity density: (cavities - edge-corrected Euler "
       "characteristic) / TV (Odgaard & Gundersen 1993)"),
    _m("SMI", "index", "1", "structure model index: 0 plates, 3 rods (Hildebrand & Ruegsegger "
       "1997)"),
    _m("DA", "ratio", "1", "degree of anisotropy, largest over smallest mean intercept length"),
    _m("Tb.N.direct", "density", "{u}^-1", "trabecular number, direct: 1 / mean distance "
       "between mid-surfaces and mid-axes (Hildebrand et al. 1999)"),
    # plates and rods (skelmorph.measure.platerod; symbols of Liu et al. 2008)
    _m("pBV/TV", "ratio", "1", "plate volume fraction: solid nearest a plate mid-surface, over "
       "the region's volume"),
    _m("rBV/TV", "ratio", "1", "rod volume fraction: solid nearest a rod mid-axis, over the "
       "region's volume"),
    _m("P-R ratio", "ratio", "1", "plate volume over rod volume"),
    _m("pTb.Th", "length", "{u}", "mean local thickness of the plate solid"),
    _m("rTb.Th", "length", "{u}", "mean local thickness of the rod solid"),
    _m("rTb.l", "length", "{u}", "mean rod length along its mid-axis, into its junctions"),
    _m("pTb.S", "area", "{u}^2", "mean plate area: plate volume over plate thickness, per plate"),
    _m("n_plates", "count", "1", "plates: pieces of mid-surface wider than twice their "
       "thickness"),
    _m("n_rods", "count", "1", "rods: pieces of mid-axis between junctions and plates"),
    _m("R-R Junc.D", "density", "{u}^-3", "rod-rod junctions per unit volume"),
    _m("P-R Junc.D", "density", "{u}^-3", "plate-rod junctions per unit volume"),
    _m("P-P Junc.D", "density", "{u}^-3", "plate-plate junction lines per unit volume"),
    _m("TV", "volume", "{u}^3", "total volume: the region of interest"),
    _m("BV", "volume", "{u}^3", "bone volume: structure voxels in the region"),
    _m("BS", "area", "{u}^2", "bone surface (marching cubes mesh area)"),
    _m("euler_characteristic", "count", "1", "Euler characteristic of the structure in the "
       "region (26-connectivity)"),
    _m("euler_edge_corrected", "index", "1", "Euler characteristic with the region's boundary "
       "terms removed (Odgaard & Gundersen 1993); a multiple of 1/8"),
    _m("cavities", "count", "1", "enclosed pockets of background"),
    _m("thickness_lattice_step", "count", "voxel", "lattice step of the local thickness "
       "(1 = exact; coarser for very thick parts)"),
    _m("separation_lattice_step", "count", "voxel", "lattice step of the local separation"),
    _m("thickness_halo", "length", "{u}", "halo of the slabs for the local thickness of a "
       "scan analysed in slabs (deep enough for the largest sphere)"),
    _m("separation_halo", "length", "{u}", "halo of the slabs for the local separation of a "
       "scan analysed in slabs"),
    _m("skeleton_gap_halo", "length", "{u}", "halo of the slabs for the distances between "
       "mid-surfaces and mid-axes (Tb.N.direct) of a scan analysed in slabs"),
    # vessels
    _m("length_density", "density", "{u} {u}^-{d}", "centreline length per unit volume of the "
       "region (per unit area in 2D)"),
    _m("murray_exponent", "index", "1", "median exponent x with r0^x = r1^x + r2^x over "
       "bifurcations (Murray 1926)"),
    _m("murray_exponent_iqr", "index", "1", "interquartile range of the bifurcation exponents"),
    _m("n_bifurcations", "count", "1", "nodes of degree 3"),
    _m("n_murray_bifurcations", "count", "1", "bifurcations where an exponent could be fitted"),
    _m("median_daughter_angle", "angle", "deg", "median angle between the two daughter branches"),
    _m("mean_distance_metric", "ratio", "1", "length-weighted mean path length over chord "
       "(Bullitt et al. 2003)"),
    _m("mean_inflection_count_metric", "ratio", "1", "mean distance metric times (inflections "
       "+ 1) (Bullitt et al. 2003)"),
    _m("mean_sum_of_angles", "density", "rad {u}^-1", "total turning angle per unit length "
       "(Bullitt et al. 2003)"),
    # cortical bone (Bouxsein et al. 2010; per slice along axis 0, then the mean)
    _m("Tt.Ar", "area", "{u}^2", "total cross-sectional area inside the periosteal envelope"),
    _m("Ct.Ar", "area", "{u}^2", "cortical bone area of a cross-section"),
    _m("Ma.Ar", "area", "{u}^2", "medullary (marrow) area of a cross-section"),
    _m("Ct.Ar/Tt.Ar", "ratio", "1", "cortical area fraction"),
    _m("Ct.Th", "length", "{u}", "mean cortical thickness (maximal spheres)"),
    _m("Ct.Th.SD", "length", "{u}", "standard deviation of the cortical thickness"),
    _m("Ct.Po", "ratio", "1", "cortical porosity: pore volume over bone plus pore volume"),
    _m("pore_count", "count", "1", "enclosed pores in the cortex (3D pieces)"),
    _m("mean_pore_volume", "volume", "{u}^3", "mean volume of a cortical pore"),
    _m("cortical_slices", "count", "1", "cross-sections holding bone"),
    # flow (skelmorph.measure.flow: Poiseuille branches, Kirchhoff's laws)
    _m("flow_conductance", "index", "{u}^3", "hydraulic conductance of the network from the "
       "root to the free ends, per unit viscosity (Poiseuille tubes)"),
    _m("flow_resistance", "index", "{u}^-3", "hydraulic resistance of the network, per unit "
       "viscosity (1 / conductance)"),
    _m("flow_weighted_radius", "length", "{u}", "mean branch radius weighted by the flow "
       "through each branch"),
    _m("flow_weighted_tortuosity", "ratio", "1", "mean branch tortuosity weighted by flow"),
    _m("flow_outlets", "count", "1", "free ends taken as outlets"),
    _m("flow_top_outlet_share", "ratio", "1", "share of the inflow leaving by the outlet "
       "that takes most"),
    _m("flow_top_decile_share", "ratio", "1", "share of the inflow leaving by the tenth of "
       "the outlets that take most"),
    # venation (Sack & Scoffoni 2013, New Phytol 198:983)
    _m("VLA", "density", "{u} {u}^-2", "vein length per area of lamina"),
    _m("major_VLA", "density", "{u} {u}^-2", "length of veins at least --major-vein-width wide "
       "per area of lamina (Sack & Scoffoni 2013)"),
    _m("minor_VLA", "density", "{u} {u}^-2", "length of veins narrower than --major-vein-width "
       "per area of lamina"),
    _m("VLA_1", "density", "{u} {u}^-2", "length of the midrib (1° vein) per area of lamina "
       "(orders by width and continuity from the leaf base, Sack & Scoffoni 2013)"),
    _m("VLA_2", "density", "{u} {u}^-2", "length of 2° veins per area of lamina"),
    _m("VLA_3", "density", "{u} {u}^-2", "length of 3° veins per area of lamina"),
    _m("VLA_higher", "density", "{u} {u}^-2", "length of 4° and finer (minor) veins per area "
       "of lamina"),
    _m("mean_width_1", "length", "{u}", "length-weighted mean width of the 1° vein"),
    _m("mean_width_2", "length", "{u}", "length-weighted mean width of 2° veins"),
    _m("mean_width_3", "length", "{u}", "length-weighted mean width of 3° veins"),
    _m("n_secondary_veins", "count", "1", "2° veins: veins branching off the midrib"),
    _m("areole_count", "count", "1", "areoles: regions of lamina enclosed by veins"),
    _m("areole_density", "density", "{u}^-2", "areoles per area of lamina"),
    _m("mean_areole_area", "area", "{u}^2", "mean area of an areole"),
    _m("mean_areole_perimeter", "length", "{u}", "mean perimeter of an areole (Crofton "
       "estimate; square pixels only)"),
    _m("mean_areole_circularity", "ratio", "1", "mean 4 pi area / perimeter^2 of the areoles "
       "(1 for a disc, 0.785 for a square)"),
    _m("free_ending_veinlets", "count", "1", "vein tips inside the lamina"),
    # hierarchical loop decomposition (Katifori & Magnasco 2012)
    _m("loop_merges", "count", "1", "areole merges of the nesting tree (veins removed thinnest "
       "first that joined two loops)"),
    _m("loop_nesting_levels", "count", "1", "height of the nesting tree of the areoles, in merge "
       "levels (Katifori & Magnasco 2012)"),
    _m("loop_partition_asymmetry", "ratio", "1", "mean partition asymmetry |r - s|/(r + s - 2) "
       "of the nesting tree's merges (van Pelt et al. 1992)"),
    _m("loop_nesting_number", "ratio", "1", "1 - mean partition asymmetry of the nesting tree: "
       "1 for loops nested in balanced halves, near 0 for loops added one by one"),
    _m("lamina_area", "area", "{u}^2", "area of the lamina (region of interest)"),
    # trees and barcodes
    _m("root_node", "identifier", "1", "node chosen as the root"),
    _m("n_trees", "count", "1", "spanning trees analysed"),
    _m("log_spanning_tree_count", "index", "1", "natural log of the number of spanning trees "
       "of the largest component (Kirchhoff's theorem)"),
    _m("tree_cuts", "count", "1", "branches cut to make the spanning tree (its loops)"),
    _m("n_chunks", "count", "1", "slabs the volume was analysed in (1 when whole in memory)"),
    _m("halo", "length", "{u}", "depth of the extra planes each slab was read with (0 when "
       "whole in memory)"),
    _m("barcode_n_bars", "count", "1", "bars of the elder-rule barcode"),
    _m("barcode_total_persistence", "length", "{u}", "sum of bar lengths"),
    _m("barcode_max_persistence", "length", "{u}", "longest bar"),
    _m("barcode_mean_persistence", "length", "{u}", "mean bar length"),
    _m("barcode_mean_birth", "length", "{u}", "mean filtration value at which bars are born"),
    _m("max_strahler_order", "count", "1", "Strahler order of the root (Strahler 1957)"),
    _m("max_diameter_order", "count", "1", "highest diameter-defined Strahler order of the "
       "tree (Jiang et al. 1994)"),
    _m("bifurcation_ratio", "ratio", "1", "mean ratio of branch counts of consecutive Strahler "
       "orders (Horton 1945)"),
    # radial profiles (Sholl 1953)
    _m("profile_max_crossings", "count", "1", "largest number of crossings of a sphere around "
       "the root"),
    _m("profile_radius_of_max_crossings", "length", "{u}", "radius of the largest number of "
       "crossings"),
    _m("profile_sholl_regression_coefficient", "density", "{u}^-1", "Sholl's regression "
       "coefficient: minus the slope of log(crossings per area or volume) over radius "
       "(Sholl 1953)"),
]

MEASURES = {m.key: m for m in _LIST}

#: Keys that record how a sample was processed, not its structure.
PROCESSING_KEYS = frozenset({"root_node", "n_trees", "tree_cuts", "thickness_lattice_step",
                             "separation_lattice_step", "TV", "lamina_area", "n_chunks",
                             "halo"})

_PATHS = re.compile(r"^paths_(\d+)_edges$")


def lookup(key):
    """The :class:`Measure` of a summary key (spreads ``_sd`` and path counts
    included), or None."""
    if key in MEASURES:
        return MEASURES[key]
    if key.endswith("_sd") and key[:-3] in MEASURES:
        base = MEASURES[key[:-3]]
        kind = "index" if base.kind == "count" else base.kind
        return Measure(key, kind, base.unit, f"spread over the spanning trees of: "
                                             f"{base.description}")
    m = _PATHS.match(key)
    if m:
        return Measure(key, "count", "1", f"simple paths of {m.group(1)} branches")
    return None


def unit_of(key, unit="um", ndim=3):
    """The unit of ``key`` for a length unit and dimension, or None if unknown.

    >>> unit_of("Conn.D", "mm")
    'mm^-3'
    >>> unit_of("length_density", "um", 2)
    'um um^-2'
    """
    m = lookup(key)
    if m is None:
        return None
    return m.unit.replace("{u}", str(unit)).replace("{d}", str(ndim))


def describe(key):
    """One-line description of a summary key ('' if unknown)."""
    m = lookup(key)
    return m.description if m is not None else ""


def units_map(summary):
    """``{key: unit}`` for every numeric key of a summary."""
    unit = summary.get("unit", "um")
    ndim = len(summary.get("image_shape", (0, 0, 0)))
    out = {}
    for key, value in summary.items():
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            u = unit_of(key, unit, ndim)
            if u is not None:
                out[key] = u
    return out


def cast_counts(summary):
    """Counts as ``int`` where the value is whole (means over random trees stay float)."""
    for key, value in summary.items():
        m = lookup(key)
        if (m is not None and m.kind == "count" and isinstance(value, float)
                and math.isfinite(value) and value == int(value)):
            summary[key] = int(value)
    return summary


_SUPERSCRIPT = str.maketrans("-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079")


def format_value(x, digits=3):
    """A number for people: whole numbers in full with thousands separators,
    others to ``digits`` significant figures, and powers of ten written out
    (``3.2 × 10⁻⁵``) only below 0.001 or from a million up.

    >>> format_value(10190.45), format_value(0.0000321), format_value(1.9999999999999998)
    ('10,190', '3.21 × 10⁻⁵', '2')
    >>> format_value(12), format_value(float("nan")), format_value(-0.4567)
    ('12', 'n/a', '-0.457')
    """
    try:
        x = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(x):
        return "n/a" if math.isnan(x) else ("∞" if x > 0 else "-∞")
    if x == 0:
        return "0"
    a = abs(x)
    if a < 1e-3 or a >= 1e6:
        mantissa, exponent = f"{x:.{digits - 1}e}".split("e")
        mantissa = mantissa.rstrip("0").rstrip(".")
        return f"{mantissa} × 10{str(int(exponent)).translate(_SUPERSCRIPT)}"
    if a >= 10 ** (digits - 1):
        return f"{x:,.0f}"
    text = f"{x:.{digits}g}"
    return text if "e" not in text else f"{x:,.0f}"
