"""The whole job for one image: read, segment, skeletonize, build the graph,
measure, and write the results."""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .build import skeleton_graph
from .graph import SkeletonGraph
from .io import ImageData, check_image_array, normalise_unit, read_image, validate_spacing, write_csv, write_json
from .measure.graph import branch_table, node_table, summarize
from .segment import to_mask

__all__ = ["AnalysisResult", "analyze", "write_results", "CAUTION"]

#: Shown wherever a person could read results as clinical.
CAUTION = ("Research measurements, not a diagnosis: skelmorph's numbers describe image "
           "structure and must not be used for clinical decisions; defer to qualified practice.")

OUTPUT_FILES = ("graph.graphml", "graph.vtp", "nodes.csv", "branches.csv", "summary.json")


@dataclass
class AnalysisResult:
    """What :func:`analyze` returns."""

    graph: SkeletonGraph
    summary: dict
    mask: np.ndarray = field(repr=False)
    timings: dict = field(default_factory=dict)


def analyze(image, spacing=None, unit=None, *, channel=None, threshold=None, dark=False,
            min_object_size=None, max_hole_size=None, prune=True, prune_factor=1.5,
            min_branch_length=0.0, extend_tips=False, smoothing=2.0, merge_junctions=True,
            out=None, progress=False):
    """Analyse one image end to end.

    Parameters
    ----------
    image : str, Path, ndarray or ImageData
        A file/folder (see :func:`skelmorph.read_image`) or an array.
    spacing, unit, channel
        Voxel size and unit (override the file's), colour channel.
    threshold, dark, min_object_size, max_hole_size
        Segmentation of grey images, see :func:`skelmorph.to_mask`.
    prune, prune_factor, min_branch_length, extend_tips, smoothing, merge_junctions
        Graph options, see :func:`skelmorph.skeleton_graph`.
    out : str or Path, optional
        Folder to write ``graph.graphml``, ``graph.vtp``, ``nodes.csv``,
        ``branches.csv`` and ``summary.json`` into.
    progress : bool
        Show a progress bar over the stages on stderr.

    Returns
    -------
    AnalysisResult
    """
    from .progress import Progress

    bar = Progress(4 + (out is not None), "analyze", enabled=progress)
    timings = {}
    t0 = time.perf_counter()
    source = None
    if isinstance(image, (str, Path)):
        source = str(image)
        image = read_image(image, spacing=spacing, unit=unit, channel=channel)
    if isinstance(image, ImageData):
        array, spacing, unit = image
    else:
        array = check_image_array(image)
        spacing = validate_spacing(1.0 if spacing is None else spacing, array.ndim)
    unit = normalise_unit(unit)
    timings["read"] = time.perf_counter() - t0
    bar.update(note="read")
    t0 = time.perf_counter()
    mask = to_mask(array, spacing, threshold=threshold, dark=dark,
                   min_object_size=min_object_size, max_hole_size=max_hole_size)
    timings["segment"] = time.perf_counter() - t0
    bar.update(note="segmented")
    graph = skeleton_graph(mask, spacing, prune=prune, unit=unit, prune_factor=prune_factor,
                           min_branch_length=min_branch_length, merge_junctions=merge_junctions,
                           extend_tips=extend_tips, smoothing=smoothing, timings=timings)
    bar.update(note="graph built")
    t0 = time.perf_counter()
    summary = summarize(graph)
    summary.update(
        source=source,
        image_shape=list(mask.shape),
        foreground_fraction=float(np.count_nonzero(mask) / mask.size),
        caution=CAUTION,
    )
    timings["measure"] = time.perf_counter() - t0
    bar.update(note="measured")
    result = AnalysisResult(graph=graph, summary=summary, mask=mask, timings=timings)
    if out is not None:
        write_results(result, out)
        bar.update(note="written")
    return result


def write_results(result, out):
    """Write the standard result files of one analysis into folder ``out``."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    g = result.graph
    g.write(out / "graph.graphml")
    g.write(out / "graph.vtp")
    write_csv(out / "nodes.csv", node_table(g))
    write_csv(out / "branches.csv", branch_table(g))
    write_json(out / "summary.json", result.summary)
    return [out / f for f in OUTPUT_FILES]
