"""From a mask to a :class:`~skelmorph.graph.SkeletonGraph`.

Steps (every one vectorised over voxels; Python loops run only over the few
nodes that pruning changes):

1. Thin the mask (:mod:`skelmorph.thinning`, or scikit-image's thinning
   via :mod:`skelmorph.skeleton`).
2. Find the 26- (8-) neighbours of every centreline voxel by binary search on
   sorted linear indices, dropping *redundant* diagonal links: a link whose
   two voxels are also joined through a face-neighbour path of the skeleton.
   Without this, every staircase corner would look like a junction.
3. Classify voxels by neighbour count: tips (1), path voxels (2), junction
   voxels (>= 3).  Touching junction voxels form one node, placed on the
   cluster voxel nearest the cluster's centroid.
4. Order the path voxels of every branch with a linear walk along each chain;
   inside a junction cluster a branch continues through the cluster's voxels
   to its node voxel (shortest paths), so no polyline jumps.
5. Radii: read from the thinning's distance map (scikit-image's thinning:
   exact nearest-background search by distance shells, a KD-tree for the
   rare thick points); per branch, the volume-equivalent radius
   (:mod:`skelmorph.radius`).
6. Loop check: thinning preserves the Euler characteristic, so the graph
   must have components + cavities - chi loops; tiny voxel cycles beyond
   that are removed.
7. Clean-up, repeated until stable: contract edges of at most
   ``MERGE_MAX_VOXELS`` voxels joining two junctions closer than the sum of
   their radii; prune terminal spurs shorter than ``prune_factor`` x the
   junction radius (or ``min_branch_length``); dissolve nodes left with two
   edges.
8. Smooth every polyline (ends fixed) and measure its length.

Where the steps live: voxel links, tiny cycles and the Euler characteristic
in :mod:`skelmorph.voxels`; point radii in :mod:`skelmorph.centreline_radius`
and branch radii in :mod:`skelmorph.radius`; the raw graph (steps 3-4) in
:mod:`skelmorph.rawgraph`; the clean-up passes and smoothing (7-8) in
:mod:`skelmorph.cleanup`; this module assembles them.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ._version import __version__
from .errors import InputError
from .io import check_image_array, normalise_unit, validate_spacing
from .segment import as_bool_mask, check_mask, count_cavities, is_binary
from .skeleton import resample_isotropic, skeletonize
from .centreline_radius import centreline_radius
from .cleanup import (_dissolve_degree_two, _drop_spurious_loops, _extend_tips, _finish,
                      _merge_close_junctions, _prune_spurs)
from .rawgraph import _centreline_voxels, _raw_graph_of_voxels, _restore_vanished, _timed
from .voxels import euler_characteristic

__all__ = ["skeleton_graph", "graph_from_skeleton", "graph_from_voxels", "centreline_radius",
           "rescale_graph"]


def graph_from_skeleton(skel, mask, spacing=None, *, unit="um", prune=True, prune_factor=1.5,
                        min_branch_length=0.0, merge_junctions=True, extend_tips=False,
                        smoothing=2.0, radius_method="shells", timings=None, meta=None,
                        dist_sq=None):
    """Build the graph of an already thinned mask.  See :func:`skeleton_graph`.

    ``dist_sq``, when given, is the mask's squared distance map
    (:func:`skelmorph.thinning.distance_map_sq`); centreline radii are then
    read from it instead of searched for.
    """
    spacing = validate_spacing(1.0 if spacing is None else spacing, mask.ndim)
    skel = np.asarray(skel, bool)
    mask = np.asarray(mask, bool)
    if skel.shape != mask.shape:
        raise InputError(f"skeleton shape {skel.shape} differs from mask shape {mask.shape}")
    coords, vox_r = _centreline_voxels(skel, mask, spacing, radius_method, timings, dist_sq)
    return _graph_of_centreline(coords, vox_r, mask, spacing, unit, prune, prune_factor,
                                min_branch_length, merge_junctions, extend_tips, smoothing,
                                timings, meta)


def _graph_of_centreline(coords, vox_r, mask, spacing, unit, prune, prune_factor,
                         min_branch_length, merge_junctions, extend_tips, smoothing, timings,
                         meta):
    """The graph of centreline voxels ``coords`` (C order) of ``mask``."""
    w = _raw_graph_of_voxels(coords, mask.shape, spacing, vox_r, timings)
    return _clean_graph(w, euler_characteristic(coords, mask.shape),
                        lambda: count_cavities(mask), spacing, unit, mask.shape, prune,
                        prune_factor, min_branch_length, merge_junctions, extend_tips, smoothing,
                        timings, meta, mask=mask)


def graph_from_voxels(coords, radii, shape, spacing, *, cavities, volumes=None, unit="um",
                      prune=True, prune_factor=1.5, min_branch_length=0.0, merge_junctions=True,
                      extend_tips=False, smoothing=2.0, timings=None, meta=None):
    """Build the graph of centreline voxels given as coordinates, without arrays
    of the image's size (the chunked analysis, :mod:`skelmorph.chunked`).

    Parameters
    ----------
    coords : (n, d) int array
        Centreline voxel indices, sorted in C order.
    radii : (n,) float array
        Distance to the background at each voxel (``spacing`` units).
    shape : tuple
        Shape of the image the voxels lie in.
    cavities : callable
        Returns the number of enclosed background components of the mask;
        called only when the voxel graph has more loops than the thinning
        can have made.
    volumes : callable, optional
        Branch volumes for equivalent radii (see
        :func:`skelmorph.radius.equivalent_radius`); without it
        ``edge_radius`` is None.

    Other parameters are those of :func:`skeleton_graph`.
    """
    return _graph_of_taken_voxels(lambda: (coords, radii), shape, spacing, cavities, volumes,
                                  unit, prune, prune_factor, min_branch_length, merge_junctions,
                                  extend_tips, smoothing, timings, meta)


def _graph_of_taken_voxels(take, shape, spacing, cavities, volumes, unit, prune, prune_factor,
                           min_branch_length, merge_junctions, extend_tips, smoothing, timings,
                           meta):
    """:func:`graph_from_voxels` of the voxels ``take()`` returns.  When
    nothing else holds them (:func:`skelmorph.chunked.chunked_graph`), they
    are freed after the raw graph: 32 bytes per voxel less at the peak."""
    spacing = validate_spacing(spacing, len(shape))
    coords, radii = take()
    coords = np.asarray(coords, np.int64)
    w = _raw_graph_of_voxels(coords, tuple(shape), spacing, np.asarray(radii, np.float64),
                             timings)
    euler = euler_characteristic(coords, shape)
    del coords, radii
    return _clean_graph(w, euler, cavities, spacing, unit, shape, prune, prune_factor,
                        min_branch_length, merge_junctions, extend_tips, smoothing, timings,
                        meta, volumes=volumes)


def _clean_graph(w, euler, cavities, spacing, unit, shape, prune, prune_factor,
                 min_branch_length, merge_junctions, extend_tips, smoothing, timings, meta,
                 mask=None, volumes=None):
    """Steps 6-8 of the module docstring on a raw graph."""
    with _timed(timings, "topology"):
        _drop_spurious_loops(w, euler, cavities)
    with _timed(timings, "graph"):
        for _ in range(100):  # each pass removes something; stable after a few
            changed = False
            if merge_junctions:
                changed |= _merge_close_junctions(w)
            if prune:
                changed |= _prune_spurs(w, prune_factor, min_branch_length)
            changed |= _dissolve_degree_two(w)
            if not changed:
                break
        if extend_tips:
            _extend_tips(w)
        meta = dict(meta or {})
        meta.update(prune=bool(prune), prune_factor=float(prune_factor),
                    min_branch_length=float(min_branch_length), merge_junctions=bool(merge_junctions),
                    tip_extension=bool(extend_tips), smoothing=float(smoothing),
                    skelmorph_version=__version__)
        return _finish(w, spacing, normalise_unit(unit), tuple(shape), smoothing, meta, mask,
                       volumes)


def skeleton_graph(mask, spacing=None, prune=True, *, unit="um", prune_factor=1.5,
                   min_branch_length=0.0, merge_junctions=True, extend_tips=False,
                   smoothing=2.0, isotropic=False, method="ordered", timings=None):
    """Centreline graph of a binary 2D or 3D mask.

    Parameters
    ----------
    mask : ndarray
        Binary image (bool, or two values; the larger is the structure).
        Use :func:`skelmorph.to_mask` for grey images.
    spacing : float or sequence of float, optional
        Voxel size, ``(z, y, x)`` order, in ``unit``.  Default 1.
    prune : bool
        Remove spurs: terminal branches no longer than
        ``max(prune_factor x radius at their junction, min_branch_length)``,
        repeated until stable.  Pruning never breaks a loop or disconnects a
        component.
    unit : str
        Length unit of ``spacing``.
    prune_factor : float
        See ``prune``; 1.5 by default (a bump of height h on a tube of radius
        r thins to a spur of length about h; common practice).
    min_branch_length : float
        Absolute spur length limit, in ``unit``.
    merge_junctions : bool
        Contract branches joining two junctions closer than the sum of their
        radii, so that two crossing veins give one node, not two.
    extend_tips : bool
        Lengthen terminal branches by the radius at their tip (thinning stops
        about one radius short of the object's end).  Off by default:
        ``total_length`` is then the length of the thinned centreline.
    smoothing : float
        Gaussian smoothing of the polylines before lengths are measured, in
        voxels (0 = raw voxel steps, which over-estimate length by 5-13 %).
    isotropic : bool
        Resample the mask to cubic voxels before thinning.  Off by default:
        the thinning works on the anisotropic grid, and resampling can cut
        diagonal links (it is kept for comparisons with scikit-image's
        thinning, which assumes cubic voxels).  Recorded in ``meta``.
    method : {"ordered", "lee", "zhang"}
        Thinning: our distance-ordered thinning (default) or scikit-image's
        (see :func:`skelmorph.skeleton.skeletonize`).
    timings : dict, optional
        Filled with seconds spent per stage (``resample``, ``skeletonize``,
        ``restore``, ``graph``, ``radii``, ``topology``).

    Returns
    -------
    SkeletonGraph

    Raises
    ------
    InputError
        A mask that is not binary, empty, all foreground, of the wrong
        dimensionality or has NaN values, or an unknown thinning method.
    SpacingError
        A bad voxel size.

    Examples
    --------
    >>> import numpy as np
    >>> ring = np.zeros((40, 40), bool)
    >>> yy, xx = np.mgrid[:40, :40]
    >>> ring[(np.hypot(yy - 20, xx - 20) < 15) & (np.hypot(yy - 20, xx - 20) > 9)] = True
    >>> skeleton_graph(ring).cycle_rank
    1

    Examples
    --------
    >>> import numpy as np
    >>> mask = np.zeros((5, 40, 40), bool)
    >>> mask[2, 20, 5:35] = True          # a bar ...
    >>> mask[2, 5:20, 20] = True          # ... and a stroke meeting it: a T
    >>> g = skeleton_graph(mask, spacing=(1.0, 1.0, 1.0))
    >>> g.n_nodes, g.n_edges, g.cycle_rank
    (4, 3, 0)
    """
    from .skeleton import THINNING_METHODS

    mask = check_image_array(mask)
    if not is_binary(mask):
        raise InputError("skeleton_graph needs a binary mask; threshold grey images first "
                         "(skelmorph.to_mask)")
    mask = check_mask(as_bool_mask(mask))
    spacing = validate_spacing(1.0 if spacing is None else spacing, mask.ndim)
    method = method or "ordered"
    if method not in THINNING_METHODS:
        raise InputError(f"unknown thinning method {method!r}; use one of "
                         f"{', '.join(THINNING_METHODS)}")
    source_spacing, source_shape = spacing, mask.shape
    # Work in units of the finest voxel side and scale back at the end, so
    # results are equivariant under a change of unit (1e-12 or 1e6 per voxel).
    scale = min(spacing)
    spacing = tuple(s / scale for s in spacing)
    min_branch_length = min_branch_length / scale
    resampled = False
    if isotropic and max(spacing) > min(spacing):
        with _timed(timings, "resample"):
            mask, spacing = resample_isotropic(mask, spacing)
        resampled = True
        check_mask(mask)
    dist_sq = None
    with _timed(timings, "skeletonize"):
        if method == "ordered":
            from .thinning import distance_map_sq, thin
            dist_sq = distance_map_sq(mask, spacing)
            skel = thin(mask, spacing, dsq=dist_sq)
        else:
            skel = skeletonize(mask, method=method)
    if method != "ordered":  # ours never erases a component
        with _timed(timings, "restore"):
            skel = _restore_vanished(mask, skel)
    # Only the centreline's voxels and radii go on: the skeleton image and the
    # distance map (5 bytes per voxel) are freed before the graph is built.
    coords, vox_r = _centreline_voxels(skel, mask, spacing, "shells", timings, dist_sq)
    del skel, dist_sq
    graph = _graph_of_centreline(coords, vox_r, mask, spacing, unit, prune, prune_factor,
                                 min_branch_length, merge_junctions, extend_tips, smoothing,
                                 timings, {"resampled_isotropic": resampled,
                                           "thinning_spacing": [x * scale for x in spacing],
                                           "thinning": method})
    # Report the source image's voxel size and shape, not the resampled ones.
    return rescale_graph(graph, scale, source_spacing, source_shape)


def rescale_graph(graph, scale, spacing, shape):
    """A graph built in units of the finest voxel side, back in physical units."""
    return dataclasses.replace(
        graph, spacing=tuple(spacing), shape=tuple(shape),
        nodes=graph.nodes * scale, node_radius=graph.node_radius * scale,
        points=graph.points * scale, point_radius=graph.point_radius * scale,
        edge_length=graph.edge_length * scale,
        edge_radius=None if graph.edge_radius is None else graph.edge_radius * scale)
