"""The whole job for one image: read, segment, skeletonize, build the graph,
measure, and write the results."""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .build import skeleton_graph
from .graph import SkeletonGraph
from .errors import InputError
from .io import ImageData, check_image_array, normalise_unit, read_image, validate_spacing, write_csv, write_json
from .measure.network import branch_table, node_table, summarize

__all__ = ["AnalysisResult", "analyze", "write_results", "prepare_mask", "PreparedMask",
           "SegmentationWarning", "CAUTION"]

#: Shown wherever a person could read results as clinical.
CAUTION = ("Research measurements, not a diagnosis: skelmorph's numbers describe image "
           "structure and must not be used for clinical decisions; defer to qualified practice.")

OUTPUT_FILES = ("graph.graphml", "graph.vtp", "graph.npz", "nodes.csv", "branches.csv",
                "summary.json")


class SegmentationWarning(UserWarning):
    """A segmentation that may not mean what it seems (see :mod:`skelmorph.quality`)."""


@dataclass
class PreparedMask:
    """What :func:`prepare_mask` returns: the structure inside the ROI's box."""

    mask: np.ndarray
    roi: np.ndarray  # None when the whole image is measured
    box: tuple  # slices of the image that ``mask`` and ``roi`` cover
    steps: list
    roi_info: dict
    warnings: list
    image_mask: np.ndarray = None  # the segmentation over the whole image, when known

    @property
    def origin(self):
        return tuple(s.start for s in self.box)


def prepare_mask(array, spacing, *, roi=None, threshold=None, dark=False, smooth=None,
                 enhance=None, scales=None, hysteresis=None, label=None, min_object_size=None,
                 max_hole_size=None):
    """Region of interest and segmentation, cropped to the region's bounding box.

    A grey image's automatic ROI (its field of view) and an ROI file are
    known before segmenting, so only their box is filtered and thresholded;
    a binary image's automatic ROI (the filled outline) comes from its mask.
    """
    from .roi import auto_roi, check_roi, load_roi, roi_box
    from .segment import is_binary, segment_image

    spacing = tuple(float(s) for s in spacing)
    voxel = float(np.prod(spacing))
    warn, how, roi_mask, image_mask = [], None, None, None
    seg = dict(threshold=threshold, dark=dark, smooth=smooth, enhance=enhance, scales=scales,
               hysteresis=hysteresis, min_object_size=min_object_size,
               max_hole_size=max_hole_size, label=label)
    if isinstance(roi, str) and roi == "auto":
        source = array
        if is_binary(array) or label is not None:  # the outline comes from the mask
            image_mask, steps = segment_image(array, spacing, **seg)
            source = image_mask
        roi_mask, found = auto_roi(source, image_mask, spacing)
        how = "auto: " + found
        if roi_mask is None:
            warn.append("--roi auto found no background around the sample (less than half "
                        "of the image border is dark); the whole image is measured")
    elif roi is not None:
        roi_mask = load_roi(roi, array.shape)
        how = f"file: {roi}" if isinstance(roi, (str, Path)) else "array"
    if roi_mask is None:
        box = tuple(slice(0, n) for n in array.shape)
        if image_mask is None:
            image_mask, steps = segment_image(array, spacing, **seg)
        info = {"source": "whole image", "volume": array.size * voxel, "fraction_of_image": 1.0,
                "box": [[0, n] for n in array.shape]}
        return PreparedMask(image_mask, None, box, steps, info, warn, image_mask)
    pad = 1
    if enhance is not None or smooth:
        widest = max([float(v) for v in (scales or (4 * min(spacing),))] + [float(smooth or 0)])
        pad = int(np.ceil(3 * widest / min(spacing))) + 1  # filters see past the ROI's edge
    box = roi_box(roi_mask, pad)
    local_roi = roi_mask[box]
    if image_mask is not None:
        mask = image_mask[box] & local_roi
    else:
        mask, steps = segment_image(array[box], spacing, roi=local_roi, **seg)
    check_roi(local_roi, mask)
    count = int(np.count_nonzero(roi_mask))
    info = {"source": how, "volume": count * voxel, "fraction_of_image": count / array.size,
            "box": [[s.start, s.stop] for s in box]}
    steps.insert(0, {"step": "region of interest", "source": how, "volume": count * voxel,
                     "fraction_of_image": count / array.size})
    return PreparedMask(mask, local_roi, box, steps, info, warn, image_mask)


def _place(graph, origin, spacing, shape):
    """Move a graph built in a box at ``origin`` (voxels) to image coordinates."""
    from dataclasses import replace
    shift = np.asarray(origin, float) * np.asarray(spacing, float)
    meta = dict(graph.meta, roi_origin=[int(o) for o in origin])
    return replace(graph, nodes=graph.nodes + shift, points=graph.points + shift,
                   shape=tuple(int(n) for n in shape), meta=meta)


@dataclass
class AnalysisResult:
    """What :func:`analyze` returns."""

    graph: SkeletonGraph
    summary: dict
    mask: np.ndarray = field(repr=False)
    timings: dict = field(default_factory=dict)
    trees: list = field(default_factory=list, repr=False)
    barcodes: list = field(default_factory=list, repr=False)
    profiles: object = field(default=None, repr=False)
    paths: dict = field(default=None, repr=False)
    branch_columns: dict = field(default_factory=dict, repr=False)
    bifurcations: dict = field(default=None, repr=False)
    maps: dict = field(default_factory=dict, repr=False)
    tables: dict = field(default_factory=dict, repr=False)  # name -> columns, as CSV
    views: dict = field(default_factory=dict, repr=False)  # name -> small arrays for figures


def analyze(image, spacing=None, unit=None, *, channel=None, threshold=None, dark=False,
            min_object_size=None, max_hole_size=None, smooth=None, enhance=None, scales=None,
            hysteresis=None, roi=None, label=None, prune=True, prune_factor=1.5,
            min_branch_length=0.0, extend_tips=False, smoothing=2.0, merge_junctions=True,
            thinning="ordered", root="thickest", tree="shortest", n_trees=1, filtration="radial", seed=0,
            root_point=None, root_face=None, n_radii=200, paths=None, measures=None,
            thickness_map=False, major_vein_width=None, work_limit=900.0, max_paths=None,
            out=None, figures=True, memory_limit=None, workers=None, scheduler=None, progress=False):
    """Analyse one image end to end.

    Parameters
    ----------
    image : str, Path, ndarray or ImageData
        A file/folder (see :func:`skelmorph.read_image`) or an array.
    spacing, unit, channel
        Voxel size and unit (override the file's), colour channel.
    threshold, dark, min_object_size, max_hole_size, smooth, enhance, scales, hysteresis, label
        Segmentation of grey images, see :func:`skelmorph.to_mask`.
    roi : path, bool array or 'auto', optional
        Region of interest (:mod:`skelmorph.roi`): a mask of the image's
        shape, or ``'auto'`` for the field of view of a grey image or the
        filled outline of a binary one.  Every measure uses it as the
        reference volume (TV, lamina); the structure and its skeleton are
        clipped to it, and the work is done inside its bounding box.
        Default: the whole image (for venation, the network's filled outline).
        A scan analysed in slabs takes an ROI file (read in slabs too), not
        ``'auto'`` or an array.
    prune, prune_factor, min_branch_length, extend_tips, smoothing, merge_junctions
        Graph options, see :func:`skelmorph.skeleton_graph`.
    thinning : {"ordered", "lee", "zhang"}
        Thinning method (``method`` of :func:`skelmorph.skeleton_graph`):
        ours by default, scikit-image's for comparison.
    root, root_point, root_face, tree, n_trees, filtration, seed
        Tree descriptors of the largest component: root rule
        (:func:`skelmorph.choose_root`), spanning rule and number of trees
        (:func:`skelmorph.spanning_trees`), barcode filtration
        (:func:`skelmorph.barcode`).  ``tree=None`` (or ``"none"``) skips them.
        Every option is defined once in :data:`skelmorph.options.ANALYZE_OPTIONS`
        (the same names on the command line, with dashes, and in TOML files).
    n_radii : int
        Radii of the radial profiles around the same root
        (:func:`skelmorph.radial_profiles`); 0 skips them.
    measures : {'bone', 'vessel', 'venation', 'all'} or list, optional
        Field measure sets added to the summary (see
        :func:`skelmorph.measure.bone.bone_measures`,
        :func:`~skelmorph.measure.vessel.vessel_measures`,
        :func:`~skelmorph.measure.venation.venation_measures`); ``'all'`` means
        every set that applies to the image's dimensionality.
    thickness_map : bool
        With bone measures, write ``thickness.tif`` and ``separation.tif``.
    major_vein_width : float, optional
        With venation measures, split VLA into major and minor veins at this
        vein width (image unit), see :func:`skelmorph.measure.venation.venation_measures`.
    paths : int, optional
        Longest path of the path-poset invariants
        (:func:`skelmorph.path_poset_invariants`), written to ``paths.json``.
    work_limit : float
        Seconds the tree descriptors, radial profiles and path counts may take
        by an estimate made from the graph's size (see
        :func:`skelmorph.options.estimate_descriptor_seconds`); beyond it the
        run stops with a message that gives the estimate.  ``inf`` removes it.
    max_paths : int, optional
        Limit on the estimated number of simple paths for ``paths``
        (default :data:`skelmorph.options.MAX_PATHS`).
    out : str or Path, optional
        Folder to write ``graph.graphml``, ``graph.vtp``, ``nodes.csv``,
        ``branches.csv``, ``summary.json`` and, with tree descriptors,
        ``barcode.csv``, with profiles ``profiles.csv`` (and ``barcode.png``,
        ``profiles.png`` when ``figures``) into.
    memory_limit : str or int, optional
        A 3D scan read from a file whose analysis would need more memory
        than this (``"8GB"``, ``"500MB"``, bytes; default half the memory
        available) is analysed in slabs read on demand
        (:mod:`skelmorph.chunked`), with the same graph.  The bone set,
        smoothing and the clean-ups work in slabs; ROIs, vessel enhancement,
        hysteresis and the other measure sets need the scan in memory.
    workers, scheduler
        Slabs run in up to ``workers`` local processes (default one per
        core; they share ``memory_limit``, and only as many run as make the
        work per process smaller, see
        :func:`skelmorph.chunked.fitting_workers`), or on a Dask cluster at ``scheduler``
        (``tcp://host:port``), each task with the whole limit.
    progress : bool
        Show a progress bar over the stages on stderr.

    Returns
    -------
    AnalysisResult
    """
    from .options import MAX_PATHS, estimate_descriptor_seconds, validate_options
    from .progress import Progress

    if root_point is not None:
        root_point = [float(v) for v in np.ravel(root_point)]
    validate_options(dict(
        channel=channel, threshold=threshold, dark=dark, min_object_size=min_object_size,
        max_hole_size=max_hole_size, smooth=smooth, enhance=enhance,
        scales=None if scales is None else list(scales),
        hysteresis=hysteresis if hysteresis is None or isinstance(hysteresis, str)
        else list(hysteresis), roi=roi if roi is None or isinstance(roi, str) else str(roi),
        label=label, prune=prune, prune_factor=prune_factor,
        min_branch_length=min_branch_length, extend_tips=extend_tips, smoothing=smoothing,
        merge_junctions=merge_junctions, thinning=thinning, root=root, tree=tree,
        n_trees=n_trees, filtration=filtration, seed=seed, root_point=root_point,
        root_face=root_face, n_radii=n_radii, paths=paths, measures=measures,
        thickness_map=thickness_map, major_vein_width=major_vein_width, figures=figures,
        work_limit=work_limit,
        max_paths=max_paths, memory_limit=memory_limit), where="analysis options")
    tree = None if tree == "none" else tree
    _check_option_pairs(root, root_point, root_face, tree, n_trees)
    if out is not None:
        _check_out(out)
    sets = _measure_sets(measures)
    bar = Progress(6 + len(sets) + (out is not None), "analyze", enabled=progress)
    timings = {}
    source = None
    volume = None
    if isinstance(image, (str, Path)):
        source = str(image)
        from .chunked import memory_limit_bytes, slab_volume
        memory_limit = memory_limit_bytes(memory_limit)  # decided once, used for the plan too
        volume = slab_volume(image, spacing, unit, memory_limit, sets)
        if volume is None:
            t0 = time.perf_counter()
            image = read_image(image, spacing=spacing, unit=unit, channel=channel)
            timings["read"] = time.perf_counter() - t0
    if volume is not None:
        from .chunked import check_slab_options
        check_slab_options(dict(channel=channel, roi=roi, smooth=smooth, enhance=enhance,
                                hysteresis=hysteresis, min_object_size=min_object_size,
                                max_hole_size=max_hole_size, thinning=thinning,
                                measures=sets, thickness_map=thickness_map))
        graph, summary, prep_warnings = _graph_in_slabs(
            volume, out, threshold=threshold, dark=dark, label=label, smooth=smooth,
            min_object_size=min_object_size, max_hole_size=max_hole_size, prune=prune,
            prune_factor=prune_factor, min_branch_length=min_branch_length,
            merge_junctions=merge_junctions, extend_tips=extend_tips, smoothing=smoothing,
            memory_limit=memory_limit, workers=workers, scheduler=scheduler, bar=bar,
            timings=timings, sets=sets, roi=roi)
        summary["source"] = source
        for line in prep_warnings:
            warnings.warn(line, SegmentationWarning, stacklevel=2)
        extra = _field_measures([], graph, None, volume.spacing, volume.unit, None, False,
                                timings, bar)
        mask = None
    else:
        graph, summary, mask, extra = _graph_in_memory(
            image, source, spacing, unit, sets, bar, timings, root, root_point, root_face,
            thickness_map, major_vein_width=major_vein_width, prune=prune,
            prune_factor=prune_factor,
            min_branch_length=min_branch_length, merge_junctions=merge_junctions,
            extend_tips=extend_tips, smoothing=smoothing, thinning=thinning, roi=roi,
            channel=channel,
            seg=dict(threshold=threshold, dark=dark, smooth=smooth, enhance=enhance,
                     scales=scales, hysteresis=hysteresis, label=label,
                     min_object_size=min_object_size, max_hole_size=max_hole_size))
    result = AnalysisResult(graph=graph, summary=summary, mask=mask, timings=timings)
    cost = estimate_descriptor_seconds(graph, n_trees if tree is not None else 0, n_radii, paths)
    limit = MAX_PATHS if max_paths is None else max_paths
    if cost["n_paths"] > limit:
        raise InputError(f"--paths {paths} would count about {cost['n_paths']:.2g} simple paths "
                         f"on this graph (limit {limit:.2g}); ask for fewer branches per path or "
                         "raise --max-paths")
    from .io import _available_memory
    have = _available_memory()
    if have is not None and cost["tree_bytes"] > 0.5 * have:
        raise InputError(f"{n_trees} spanning trees of this graph would need about "
                         f"{cost['tree_bytes'] / 2**30:.1f} GiB ({have / 2**30:.1f} GiB "
                         "available); ask for fewer trees (--n-trees)")
    seconds = cost["trees"] + cost["radii"] + cost["paths"]
    if seconds > work_limit:
        raise InputError(f"the tree descriptors, radial profiles and path counts would take about "
                         f"{seconds:.0f} s on this graph (trees {cost['trees']:.0f} s, radii "
                         f"{cost['radii']:.0f} s, paths {cost['paths']:.0f} s; limit "
                         f"{work_limit:g} s); ask for fewer or raise --work-limit")
    summary.update(extra.pop("summary"))
    result.branch_columns = extra["branch_columns"]
    result.tables = extra["tables"]
    result.bifurcations = extra["bifurcations"]
    result.maps = extra["maps"]
    result.views = extra["views"]
    if tree is not None and graph.n_nodes:
        from .descriptors.barcode import graph_barcodes
        t0 = time.perf_counter()
        result.trees, result.barcodes, tsum = graph_barcodes(
            graph, root=root, tree=tree, n_trees=n_trees, filtration=filtration, seed=seed,
            point=root_point, face=root_face or "z-")
        summary.update(tsum)
        if result.trees:  # diameter-defined orders of the first tree (Jiang et al. 1994)
            from .measure.orders import diameter_strahler
            ds = diameter_strahler(result.trees[0])
            summary["max_diameter_order"] = int(max(ds["orders"]["order"], default=0))
            rows = np.asarray(ds["orders"]["order"], int) - 1  # the orders present
            result.tables["diameter_orders"] = {
                **ds["orders"], **{f"springs_from_{n + 1}": ds["connectivity"][rows, n]
                                   for n in rows}}
        timings["trees"] = time.perf_counter() - t0
    bar.update(note="trees")
    if n_radii and graph.n_nodes:
        from .descriptors.radial import profile_summary, radial_profiles
        from .rooting import choose_root
        t0 = time.perf_counter()
        r = summary.get("root_node")
        if r is None:
            r = choose_root(graph, root, point=root_point, face=root_face or "z-")
        result.profiles = radial_profiles(graph, root=int(r), n_radii=n_radii)
        summary.update({f"profile_{k}": v for k, v in profile_summary(result.profiles).items()})
        timings["profiles"] = time.perf_counter() - t0
    bar.update(note="profiles")
    if paths:
        from .descriptors.paths import path_poset_invariants
        t0 = time.perf_counter()
        inv = {m: path_poset_invariants(graph, int(paths), min_edges=m) for m in (0, 1)
               if int(paths) >= m}
        result.paths = {
            "k": int(paths),
            "counts": [int(x) for x in inv[0]["counts"]],
            "from_vertices": {"f_vector": inv[0]["f_vector"], "betti": list(inv[0]["betti"])},
            "from_edges": ({"f_vector": inv[1]["f_vector"], "betti": list(inv[1]["betti"])}
                           if 1 in inv else None),
        }
        for j, x in enumerate(result.paths["counts"]):
            summary[f"paths_{j}_edges"] = x
        timings["paths"] = time.perf_counter() - t0
    _finalise_summary(summary)
    if out is not None:
        write_results(result, out, figures=figures)
        bar.update(note="written")
    return result


def _graph_in_memory(image, source, spacing, unit, sets, bar, timings, root, root_point,
                     root_face, thickness_map, *, major_vein_width, prune, prune_factor,
                     min_branch_length,
                     merge_junctions, extend_tips, smoothing, thinning, roi, channel, seg):
    """Segment, build the graph and run the field measures in memory."""
    t0 = time.perf_counter()
    if isinstance(image, ImageData):
        array, spacing, unit = image
    else:
        array = check_image_array(image)
        spacing = validate_spacing(1.0 if spacing is None else spacing, array.ndim)
    unit = normalise_unit(unit)
    _check_sets(sets, array.ndim)
    timings["read"] = timings.get("read", 0.0) + time.perf_counter() - t0
    bar.update(note="read")
    t0 = time.perf_counter()
    prep = prepare_mask(array, spacing, roi=roi, **seg)
    mask, roi_mask = prep.mask, prep.roi
    if channel is not None:
        prep.steps.insert(0, {"step": "colour channel", "channel": channel})
    for step in prep.steps:  # every physical value with its unit
        if step["step"] in ("gaussian smoothing", "vessel enhancement"):
            step["unit"] = unit
        elif step["step"] in ("speck removal", "hole filling", "region of interest"):
            step["unit"] = f"{unit}^{array.ndim}"
    timings["segment"] = time.perf_counter() - t0
    bar.update(note="segmented")
    graph = skeleton_graph(mask, spacing, prune=prune, unit=unit, prune_factor=prune_factor,
                           min_branch_length=min_branch_length, merge_junctions=merge_junctions,
                           extend_tips=extend_tips, smoothing=smoothing, method=thinning,
                           timings=timings)
    graph = _place(graph, prep.origin, spacing, array.shape)
    bar.update(note="graph built")
    t0 = time.perf_counter()
    summary = summarize(graph)
    from .quality import segmentation_warnings
    warn = prep.warnings + segmentation_warnings(mask, graph, roi=roi_mask,
                                                 image_mask=prep.image_mask)
    inside = int(np.count_nonzero(roi_mask)) if roi_mask is not None else mask.size
    prep.roi_info["volume_unit"] = f"{unit}^{array.ndim}"
    summary.update(
        source=source,
        image_shape=list(array.shape),
        volume_fraction=float(np.count_nonzero(mask) / inside),
        roi=prep.roi_info,
        preprocessing=prep.steps,
        warnings=warn,
        caution=CAUTION,
    )
    for line in warn:
        warnings.warn(line, SegmentationWarning, stacklevel=3)
    timings["measure"] = time.perf_counter() - t0
    bar.update(note="measured")
    extra = _field_measures(sets, graph, mask, spacing, unit, roi_mask, thickness_map,
                            timings, bar, root_rule=(root, root_point, root_face),
                            major_vein_width=major_vein_width)
    for name, local in extra["maps"].items():  # maps of the ROI box, put back in the image
        full = np.zeros(array.shape, local.dtype)
        full[prep.box] = local
        extra["maps"][name] = full
    summary.update(n_chunks=1, halo=0.0)
    return graph, summary, mask, extra


def _graph_in_slabs(volume, out, *, threshold, dark, label, prune, prune_factor,
                    min_branch_length, merge_junctions, extend_tips, smoothing, memory_limit,
                    workers, scheduler, bar, timings, sets=(), smooth=None,
                    min_object_size=None, max_hole_size=None, roi=None):
    """Survey, thin in slabs and build the graph of a scan too large for memory.

    ``roi`` is an ROI file's path (:mod:`skelmorph.slab_roi`): the scan is
    then read in the ROI's box and clipped to it, as in memory.
    """
    from .chunked import (Segmenter, chunked_graph, cleaned_volume, smoothed_volume, survey,
                          work_folder)
    from .engine import local_workers
    workers = local_workers(workers)
    t0 = time.perf_counter()
    whole = volume
    if smooth:  # every slab is read through the filter
        volume = smoothed_volume(volume, smooth, label=label)
        sigma = volume.sigma
    roi_volume = box = None
    if roi is not None:
        from .slab_roi import CroppedVolume, open_roi
        roi_volume, roi_count, tight, box = open_roi(roi, whole, smooth)
        volume = CroppedVolume(volume, box)
    seg = survey(volume, threshold=threshold, dark=dark, label=label, progress=bar.enabled,
                 roi=roi_volume)
    if smooth:
        seg.steps.insert(0, {"step": "gaussian smoothing", "sigma": sigma})
    grey = seg.mode == "threshold"
    if roi is not None:
        from .slab_roi import RoiClippedVolume
        volume = RoiClippedVolume(volume, seg, roi_volume)
        seg = Segmenter("binary", 0.0, False, list(seg.steps) + [{"step": "clip to ROI"}])
    # Specks and small holes, as in memory; every slab is read through them.
    cleaned, seg = cleaned_volume(volume, seg, volume.spacing, min_object_size, max_hole_size,
                                  grey=grey)
    if roi is not None and cleaned is not volume:  # a filled hole may reach past the ROI
        cleaned = RoiClippedVolume(cleaned, Segmenter("binary", 0.0), roi_volume)
    volume = cleaned
    timings["read"] = time.perf_counter() - t0
    bar.update(note="surveyed")
    limit = memory_limit  # bytes, decided by analyze()
    graph, info = chunked_graph(
        volume, seg, memory_limit=limit, workdir=work_folder(out, volume.source),
        workers=workers, scheduler=scheduler, timings=timings, progress=bar.enabled, prune=prune,
        prune_factor=prune_factor, min_branch_length=min_branch_length,
        merge_junctions=merge_junctions, extend_tips=extend_tips, smoothing=smoothing)
    unit = volume.unit
    voxel = float(np.prod(volume.spacing))
    n_image = int(np.prod(whole.shape, dtype=np.int64))
    steps = list(seg.steps)
    if roi is None:
        n = n_image
        roi_info = {"source": "whole image", "volume": n * voxel, "fraction_of_image": 1.0,
                    "box": [[0, k] for k in whole.shape]}
    else:  # the graph of the ROI's box, moved to image coordinates (as in memory)
        graph = _place(graph, [a for a, _ in box], volume.spacing, whole.shape)
        n = roi_count
        roi_info = {"source": f"file: {roi}", "volume": n * voxel,
                    "fraction_of_image": n / n_image, "box": [list(b) for b in box]}
        steps.insert(0, {"step": "region of interest", "source": roi_info["source"],
                         "volume": n * voxel, "fraction_of_image": n / n_image})
    bar.update(note="graph built")
    summary = summarize(graph)
    roi_info["volume_unit"] = f"{unit}^3"
    for step in steps:  # every physical value with its unit, as in memory
        if step["step"] in ("speck removal", "hole filling", "region of interest"):
            step["unit"] = f"{unit}^3"
    steps[-1] = dict(steps[-1], foreground_fraction=info["foreground"] / n)
    steps.append({"step": "analysed in slabs", "slabs": info["n_chunks"],
                  "halo_planes": info["halo"], "memory_limit_bytes": limit,
                  "local_workers": workers if scheduler is None else 0,
                  "read_as": volume.kind})
    summary.update(
        image_shape=list(whole.shape),
        volume_fraction=info["foreground"] / n,
        roi=roi_info,
        preprocessing=steps,
        warnings=info["warnings"],
        caution=CAUTION,
        n_chunks=info["n_chunks"],
        halo=info["halo"] * float(volume.spacing[0]),
    )
    bar.update(note="measured")
    if "bone" in sets:
        from .chunked import chunked_bone_measures
        t0 = time.perf_counter()
        bone_volume, bone_roi = volume, None
        if roi is not None:  # the ROI's tight box, as in memory
            from .slab_roi import CroppedVolume
            inner = [(a - p, b - p) for (a, b), (p, _) in zip(tight, box)]
            bone_volume = CroppedVolume(volume, inner)
            bone_roi = CroppedVolume(roi_volume, inner)
        bone = chunked_bone_measures(bone_volume, seg, volume.spacing, info["foreground"],
                                     info["cavities"](), limit, workers=workers,
                                     scheduler=scheduler, progress=bar.enabled,
                                     workdir=work_folder(out, bone_volume.source),
                                     timings=timings, roi=bone_roi,
                                     roi_count=None if roi is None else roi_count)
        notes = ["the plate and rod measures need components of the whole surface skeleton "
                 "and were not computed in slabs"]
        if "skipped" in bone:
            notes.append(bone.pop("skipped"))
            warnings.warn(notes[-1], SegmentationWarning, stacklevel=2)
        summary.update(bone)
        summary.setdefault("skipped_measures", {})["bone"] = "; ".join(notes)
        summary["measure_sets"] = ["bone"]
        timings["bone"] = time.perf_counter() - t0
        bar.update(note="bone measures")
    return graph, summary, info["warnings"]


def _check_option_pairs(root, root_point, root_face, tree, n_trees):
    """Options that only mean something with another one: refuse them alone,
    naming the command-line flags."""
    if n_trees > 1 and tree != "random":
        raise InputError(f"--n-trees {n_trees} needs --tree random (the '{tree}' rule gives one "
                         "tree)")
    if root == "point" and root_point is None:
        raise InputError("--root point needs --root-point with the position (z) y x")
    if root_point is not None and root != "point":
        raise InputError("--root-point needs --root point")
    if root_face is not None and root != "face":
        raise InputError("--root-face needs --root face")


def _check_out(out):
    """Find problems with the output folder before any work."""
    import os
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"--out {out} is an existing file, not a folder")
    probe = out
    while not probe.exists():  # the nearest existing parent must be writable
        probe = probe.parent
    if not os.access(probe, os.W_OK | os.X_OK):
        raise InputError(f"cannot write results into {out}: {probe} is not writable")


def _finalise_summary(summary):
    """One name per quantity, counts as integers, and one ``units`` map for
    every numeric key (from :mod:`skelmorph.results`)."""
    from .results import cast_counts, units_map
    if "BV/TV" in summary:  # the bone set's name for the same share
        summary.pop("volume_fraction", None)
    cast_counts(summary)
    summary["units"] = units_map(summary)
    return summary


MEASURE_SETS = ("bone", "vessel", "venation", "cortical")
#: ``measures='all'`` leaves out the bone set below this solid share of the
#: ROI: trabecular bone and foams are far denser (BV/TV of 5-40 % in the
#: micro-CT guideline's examples, Bouxsein et al. 2010), a vessel tree is
#: not a porous solid.
MIN_POROUS_SHARE = 0.01


def _measure_sets(measures):
    if measures is None or measures == "none":
        return []
    if isinstance(measures, str):
        measures = [measures]
    bad = [m for m in measures if m not in MEASURE_SETS + ("all",)]
    if bad:
        raise InputError(f"unknown measure set {bad[0]!r}; choose from "
                         f"{', '.join(MEASURE_SETS)} or all")
    return list(measures)


def _check_sets(sets, ndim):
    """Refuse a measure set that does not apply, before the costly steps."""
    if "bone" in sets and ndim != 3:
        raise InputError(f"bone measures need a 3D image; this one is {ndim}D "
                         "(use --measures vessel or venation for 2D images)")
    if "venation" in sets and ndim != 2:
        raise InputError(f"venation measures need a 2D image; this one is {ndim}D")
    if "cortical" in sets and ndim != 3:
        raise InputError(f"the cortical set needs a 3D image with the bone along axis 0; "
                         f"this one is {ndim}D")


#: Parts of measure sets that can be skipped: key in ``skipped_measures``, name.
_PARTS = {"flow": "flow measures", "vein_orders": "vein orders"}


def _skip(summary, key, exc):
    """Record and warn that a part of a measure set could not be computed."""
    note = f"{_PARTS[key]} skipped: {exc}"
    summary.setdefault("skipped_measures", {})[key] = note
    warnings.warn(note, SegmentationWarning, stacklevel=4)


def _rule_root(graph, root_rule, summary, key):
    """The root node chosen by the ``--root`` rule, or None (recorded under
    ``key`` and warned) when the rule finds none."""
    from .rooting import choose_root
    try:
        return int(choose_root(graph, root_rule[0], point=root_rule[1],
                               face=root_rule[2] or "z-"))
    except InputError as exc:
        _skip(summary, key, exc)
        return None


def _field_measures(sets, graph, mask, spacing, unit, roi, thickness_map, timings, bar,
                    root_rule=("thickest", None, None), major_vein_width=None):
    """Bone, vessel and venation measure sets, as asked."""
    out = {"summary": {}, "branch_columns": {}, "bifurcations": None, "maps": {}, "tables": {},
           "views": {}}
    if not sets:
        return out
    if "all" in sets:
        # 'all' is every set that applies to the dimension; the cortical set
        # needs a shell along axis 0 and comes only when asked for.
        extra_sets = [s for s in sets if s == "cortical"]
        sets = (["bone", "vessel"] if mask.ndim == 3 else ["vessel", "venation"]) + extra_sets
        inside = mask.size if roi is None else int(np.count_nonzero(roi))
        share = np.count_nonzero(mask) / max(inside, 1)
        if "bone" in sets and share < MIN_POROUS_SHARE:
            sets.remove("bone")  # a sparse network, not a porous solid
            note = (f"bone measures skipped: the structure fills {share:.2%} of the "
                    f"{'ROI' if roi is not None else 'image'}, a sparse network rather than a "
                    "porous solid (ask for --measures bone to have them anyway)")
            out["summary"]["skipped_measures"] = {"bone": note}
            warnings.warn(note, SegmentationWarning, stacklevel=3)
    for name in sets:
        t0 = time.perf_counter()
        if name == "bone":
            from .measure.bone import bone_measures
            from .measure.platerod import plate_rod_projections
            res, maps = bone_measures(mask, spacing, unit, thickness_maps=thickness_map, roi=roi,
                                      plate_rod_map=True)
            out["views"]["plate_rod"] = plate_rod_projections(maps["plate_rod"])
            if not thickness_map:
                del maps["plate_rod"]
            out["maps"] = maps
            out["summary"].update(res)
        elif name == "vessel":
            from .measure.vessel import vessel_measures
            summ, cols, bif = vessel_measures(graph, mask, spacing, unit, roi=roi)
            out["summary"].update(summ)
            out["branch_columns"].update(cols)
            out["bifurcations"] = bif
            # Poiseuille flow from the root (the inlet) to the other free ends.
            from .measure.flow import flow_measures
            inlet = _rule_root(graph, root_rule, out["summary"], "flow")
            if inlet is not None:
                try:
                    fsum, fcols = flow_measures(graph, inlet)
                    out["summary"].update(fsum)
                    out["branch_columns"].update(fcols)
                except InputError as exc:
                    _skip(out["summary"], "flow", exc)
        elif name == "cortical":
            from .measure.cortical import cortical_measures
            summ, slices = cortical_measures(mask, spacing, unit)
            out["summary"].update(summ)
            out["tables"]["cortical_slices"] = slices
        elif name == "venation":
            from .measure.loops import loop_hierarchy
            from .measure.venation import venation_measures
            origin = graph.meta.get("roi_origin")
            base = _rule_root(graph, root_rule, out["summary"], "vein_orders")  # leaf base
            vsum = venation_measures(graph, mask, spacing, unit, region=roi, origin=origin,
                                     major_width=major_vein_width, root=base)
            if "branch_orders" in vsum:
                out["branch_columns"]["vein_order"] = vsum.pop("branch_orders")
            out["summary"].update(vsum)
            lsum, ltable = loop_hierarchy(graph, mask, spacing, region=roi, origin=origin)
            out["summary"].update(lsum)
            out["tables"]["loop_hierarchy"] = ltable
            from .measure.venation import areole_shapes
            asum, atable = areole_shapes(mask, spacing, region=roi)
            out["summary"].update(asum)
            out["tables"]["areoles"] = atable
        timings[name] = time.perf_counter() - t0
        bar.update(note=f"{name} measures")
    out["summary"]["measure_sets"] = list(sets)
    return out


def _one_panel_figure(path, size, title, draw):
    """Draw one panel with ``draw(ax)``, title it as research measurements, save it."""
    from .report.figures import new_axes, save
    fig, ax = new_axes(1, 1, size=size, fixed=True)
    draw(ax[0, 0])
    ax[0, 0].set_title(f"{title} (research measurements)", fontsize=8)
    save(fig, path)
    return path


def write_results(result, out, figures=True):
    """Write the standard result files of one analysis into folder ``out``."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    g = result.graph
    g.write(out / "graph.graphml")
    g.write(out / "graph.vtp")
    g.write(out / "graph.npz")
    write_csv(out / "nodes.csv", node_table(g))
    table = branch_table(g)
    table.update(result.branch_columns)
    write_csv(out / "branches.csv", table)
    write_json(out / "summary.json", result.summary)
    files = [out / f for f in OUTPUT_FILES]
    if result.bifurcations is not None:
        write_csv(out / "bifurcations.csv", result.bifurcations)
        files.append(out / "bifurcations.csv")
    for name, table in result.tables.items():
        write_csv(out / f"{name}.csv", table)
        files.append(out / f"{name}.csv")
    if figures and "cortical_slices" in result.tables:
        from .report.figures import new_axes, save
        t = result.tables["cortical_slices"]
        fig, ax = new_axes(2, 1, size=(3.6, 2.8), fixed=True)
        for key in ("Tt.Ar", "Ct.Ar", "Ma.Ar"):
            ax[0, 0].plot(t["position"], t[key], label=key)
        ax[0, 0].set_xlabel(f"position along axis 0 ({g.unit})")
        ax[0, 0].set_ylabel(f"area ({g.unit}^2)")
        ax[0, 0].legend(fontsize=7, frameon=False)
        ax[0, 1].plot(t["position"], t["Ct.Ar/Tt.Ar"], color="0.2")
        ax[0, 1].set_xlabel(f"position along axis 0 ({g.unit})")
        ax[0, 1].set_ylabel("Ct.Ar/Tt.Ar")
        fig.suptitle("cortical cross-sections (research measurements)", fontsize=9)
        save(fig, out / "cortical.png")
        files.append(out / "cortical.png")
    if figures and "plate_rod" in result.views:
        from .report.figures import new_axes, plot_plate_rod_views, save
        fig, ax = new_axes(3, 1, size=(3.0, 3.0), fixed=True)
        plot_plate_rod_views(result.views["plate_rod"], g.spacing, ax[0], unit=g.unit)
        fig.suptitle("plates and rods, projected along each axis (research measurements)",
                     fontsize=9)
        save(fig, out / "plate_rod.png")
        files.append(out / "plate_rod.png")
    if figures and "loop_hierarchy" in result.tables:
        from .report.figures import plot_loop_hierarchy
        files.append(_one_panel_figure(
            out / "loop_hierarchy.png", (5.8, 3.4),
            "nesting tree of the areoles, veins removed thinnest first",
            lambda ax: plot_loop_hierarchy(result.tables["loop_hierarchy"], ax, unit=g.unit)))
    if figures and "vein_order" in result.branch_columns:
        from .report.figures import plot_vein_orders
        files.append(_one_panel_figure(
            out / "vein_orders.png", (5.8, 4.6),
            "vein orders by width and continuity from the base",
            lambda ax: plot_vein_orders(g, result.branch_columns["vein_order"], ax,
                                        unit=g.unit)))
    if figures and "flow" in result.branch_columns:
        from .report.figures import new_axes, plot_flow, save
        fig, ax = new_axes(1, 1, size=(5.8, 4.6), fixed=True)
        lc = plot_flow(g, result.branch_columns["flow"], ax[0, 0], unit=g.unit)
        from matplotlib.ticker import FuncFormatter, NullFormatter
        from .results import format_value
        cb = fig.colorbar(lc, ax=ax[0, 0], shrink=0.8,
                          label=f"flow ({g.unit}^3 per unit time and viscosity, model)")
        cb.ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: format_value(v, 2)))
        cb.ax.yaxis.set_minor_formatter(NullFormatter())
        ax[0, 0].set_title("Poiseuille flow from the root (a model, not measured flow)",
                           fontsize=8)
        save(fig, out / "flow.png")
        files.append(out / "flow.png")
    for name, array in result.maps.items():
        from .io import write_tiff
        write_tiff(out / f"{name}.tif", array, g.spacing, g.unit)
        files.append(out / f"{name}.tif")
    if result.barcodes:
        tree_id = np.concatenate([np.full(len(b), i) for i, b in enumerate(result.barcodes)])
        bars = np.concatenate(result.barcodes).reshape(-1, 2)
        write_csv(out / "barcode.csv", {"tree": tree_id, "birth": bars[:, 0], "death": bars[:, 1]})
        files.append(out / "barcode.csv")
        if figures:
            files.append(_barcode_figure(result, out / "barcode.png"))
    if result.paths is not None:
        write_json(out / "paths.json", result.paths)
        files.append(out / "paths.json")
    if result.profiles is not None:
        write_csv(out / "profiles.csv", {k: result.profiles[k].to_numpy()
                                         for k in result.profiles.columns})
        files.append(out / "profiles.csv")
        if figures:
            from .report.figures import new_axes, plot_profiles, save
            fig, axes = new_axes(4, 4, size=(2.6, 2.1), fixed=True)
            plot_profiles(result.profiles, axes, unit=result.summary["unit"])
            fig.suptitle("radial profiles around the root (" + CAUTION.split(":")[0].lower() + ")",
                         fontsize=9)
            save(fig, out / "profiles.png")
            files.append(out / "profiles.png")
    return files


def _barcode_figure(result, path):
    from .report.figures import new_axes, plot_barcode, plot_diagram, save
    s = result.summary
    fig, ax = new_axes(2, fixed=True)
    label = f"{s['filtration']} filtration, {s['tree_method']} tree"
    plot_barcode(result.barcodes[0], ax[0, 0], unit=s["unit"], label=label)
    for i, b in enumerate(result.barcodes[:20]):
        plot_diagram(b, ax[0, 1], unit=s["unit"], label="persistence diagram")
    save(fig, path)
    return path
