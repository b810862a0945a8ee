"""skelmorph: from segmented 2D/3D images of branching or porous structures to
measured networks, tree descriptors and cohort comparisons.

Outputs are research measurements, not diagnoses.

The public API is imported lazily, so ``import skelmorph`` stays fast.
"""

from ._version import __version__
from .errors import ImageReadError, InputError, SkelmorphError, SpacingError

_LAZY = {
    "read_image": "io",
    "ImageData": "io",
    "to_mask": "segment",
    "skeletonize": "skeleton",
    "skeleton_graph": "build",
    "graph_from_skeleton": "build",
    "SkeletonGraph": "graph",
    "summarize": "measure.network",
    "branch_table": "measure.network",
    "node_table": "measure.network",
    "analyze": "pipeline",
    "Tree": "tree",
    "choose_root": "rooting",
    "spanning_trees": "rooting",
    "count_spanning_trees": "rooting",
    "barcode": "descriptors.barcode",
    "graph_barcodes": "descriptors.barcode",
    "PersistenceImager": "descriptors.persistence_images",
    "persistence_image": "descriptors.persistence_images",
    "bottleneck_distance": "descriptors.distances",
    "wasserstein_distance": "descriptors.distances",
    "landscape": "descriptors.distances",
    "landscape_distance": "descriptors.distances",
    "strahler_order": "measure.orders",
    "radial_profiles": "descriptors.radial",
    "profile_distance": "descriptors.radial",
    "profile_summary": "descriptors.radial",
    "path_counts": "descriptors.paths",
    "path_poset_invariants": "descriptors.paths",
    "bifurcation_ratio": "measure.orders",
    "phantoms": None,
}

__all__ = ["__version__", "SkelmorphError", "ImageReadError", "InputError", "SpacingError",
           *_LAZY]


def __getattr__(name):
    import importlib

    if name not in _LAZY:
        raise AttributeError(f"module 'skelmorph' has no attribute {name!r}")
    module = _LAZY[name]
    if module is None:
        return importlib.import_module(f".{name}", __name__)
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(__all__)
