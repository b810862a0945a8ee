"""Measures of the centreline graph: counts, lengths, loops, per-branch tables."""

from __future__ import annotations

import numpy as np

from .._version import __version__

__all__ = ["summarize", "branch_table", "node_table"]


def branch_table(graph):
    """One row per branch (edge), as ``{column: array}``.

    Columns: ``branch``, ``node_a``, ``node_b`` (end nodes), ``length``
    (smoothed centreline), ``chord`` (straight distance between the ends),
    ``tortuosity`` (length / chord; empty for rings), ``radius_mean``
    (length-weighted mean of the point radii), ``radius_min``, ``radius_max``,
    ``radius_equivalent`` (the volume-equivalent branch radius of
    :mod:`skelmorph.radius`, unbiased at a few voxels; empty for branches too
    short to have one) and ``kind``:
    ``terminal`` (tip to junction), ``internal`` (junction to junction),
    ``isolated`` (tip to tip) or ``ring`` (a loop from a node to itself).
    Lengths and radii are in ``graph.unit``.
    """
    chord = graph.edge_chord
    with np.errstate(divide="ignore", invalid="ignore"):
        tort = np.where(chord > 0, graph.edge_length / chord, np.nan)
    mean, rmin, rmax = graph.edge_radius_stats()
    return {
        "branch": np.arange(graph.n_edges),
        "node_a": graph.edges[:, 0],
        "node_b": graph.edges[:, 1],
        "length": graph.edge_length,
        "chord": chord,
        "tortuosity": tort,
        "radius_mean": mean,
        "radius_min": rmin,
        "radius_max": rmax,
        "radius_equivalent": (graph.edge_radius if graph.edge_radius is not None
                              and len(graph.edge_radius) == graph.n_edges
                              else np.full(graph.n_edges, np.nan)),
        "kind": graph.edge_kind,
    }


def node_table(graph):
    """One row per node: ``node``, coordinates (``z``, ``y``, ``x``), ``radius``,
    ``degree``, ``component``."""
    names = ("z", "y", "x")[-graph.ndim:]
    table = {"node": np.arange(graph.n_nodes)}
    table.update({a: graph.nodes[:, i] for i, a in enumerate(names)})
    table.update(radius=graph.node_radius, degree=graph.node_degree,
                 component=graph.component_labels())
    return table


def summarize(graph):
    """Scalar summary of a graph: the content of ``summary.json``.

    All lengths are in ``graph.unit``.  Keys:

    ``total_length``
        Sum of branch lengths (smoothed centrelines; see ``tip_extension``).
    ``n_nodes``, ``n_branches``, ``n_junctions`` (degree >= 3), ``n_tips``
    (degree 1), ``n_isolated_points`` (degree 0), ``n_rings``
    ``n_components``
        Connected components (isolated points included).
    ``cycle_rank``
        Independent loops, E - V + C.
    ``mean_branch_length``, ``median_branch_length``
    ``mean_radius``
        Length-weighted mean radius over all branches.
    ``mean_tortuosity``
        Mean length/chord over branches that are not rings.
    ``spacing``, ``unit``, ``skelmorph_version``, ``tip_extension``
    ``processing``
        The choices that shaped the graph: thinning method, whether the mask
        was resampled (and the voxel size thinned), smoothing, pruning,
        junction merging.
    """
    deg = graph.node_degree
    length = graph.edge_length
    total = float(length.sum())
    kinds = graph.edge_kind
    if graph.n_edges:
        mean_r, _, _ = graph.edge_radius_stats()
        mean_radius = float(np.sum(mean_r * length) / total) if total > 0 else float(np.mean(mean_r))
        chord = graph.edge_chord
        ok = (kinds != "ring") & (chord > 0)
        mean_tort = float(np.mean(length[ok] / chord[ok])) if ok.any() else float("nan")
    else:
        mean_radius = float(np.mean(graph.node_radius)) if graph.n_nodes else float("nan")
        mean_tort = float("nan")
    return {
        "total_length": total,
        "n_nodes": int(graph.n_nodes),
        "n_branches": int(graph.n_edges),
        "n_junctions": int(np.count_nonzero(deg >= 3)),
        "n_tips": int(np.count_nonzero(deg == 1)),
        "n_isolated_points": int(np.count_nonzero(deg == 0)),
        "n_rings": int(np.count_nonzero(kinds == "ring")),
        "n_components": int(graph.n_components),
        "cycle_rank": int(graph.cycle_rank),
        "mean_branch_length": float(length.mean()) if graph.n_edges else 0.0,
        "median_branch_length": float(np.median(length)) if graph.n_edges else 0.0,
        "mean_radius": mean_radius,
        "mean_tortuosity": mean_tort,
        "spacing": list(graph.spacing),
        "unit": graph.unit,
        "tip_extension": bool(graph.meta.get("tip_extension", False)),
        "processing": {k: graph.meta[k] for k in ("thinning", "resampled_isotropic",
                                                  "thinning_spacing", "smoothing", "prune",
                                                  "prune_factor", "merge_junctions")
                       if k in graph.meta},
        "skelmorph_version": __version__,
    }
