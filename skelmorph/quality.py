"""Warnings that catch a bad segmentation before anyone trusts its numbers.

Each check is a plain rule with a stated limit (common practice for
segmentation review, not a published standard); each warning is one line.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["segmentation_warnings", "MIN_BRANCHES"]

#: Below this many branches, network statistics describe almost nothing.
MIN_BRANCHES = 5
_MAX_FOREGROUND_SHARE = 0.5
_MAX_BORDER_SHARE = 0.75
_BLOB_SHARE = 0.5
_BLOB_RATIO = 3.0


def _border_share(mask):
    from .roi import border_mask
    edge = border_mask(mask.shape)
    return np.count_nonzero(mask & edge) / np.count_nonzero(edge)


def segmentation_warnings(mask, graph, roi=None, image_mask=None):
    """One-line warnings about a segmentation and its graph.

    Parameters
    ----------
    mask : bool array
        The segmented structure (clipped to the ROI).
    graph : SkeletonGraph
    roi : bool array, optional
        Region of interest, same shape as ``mask``; default the whole array.
    image_mask : bool array, optional
        The segmentation over the whole image (for the border check); default
        ``mask``.

    Returns
    -------
    list of str
    """
    out = []
    inside = int(np.count_nonzero(roi)) if roi is not None else mask.size
    share = np.count_nonzero(mask) / max(inside, 1)
    where = "the ROI" if roi is not None else "the image"
    if share > _MAX_FOREGROUND_SHARE:
        out.append(f"the structure fills {share:.0%} of {where}: the threshold may have kept "
                   "the background (try --dark, --roi or --enhance vessels)")
    full = mask if image_mask is None else image_mask
    border = _border_share(full)
    if border > _MAX_BORDER_SHARE:
        out.append(f"the structure covers {border:.0%} of the image border: the background "
                   "or the scanner's surround may have been segmented (try --dark or --roi)")
    if graph.n_nodes and graph.n_edges:
        radius = graph.branch_radius()
        typical = float(np.nanmedian(radius)) if np.isfinite(radius).any() else float("nan")
        big = float(graph.node_radius.max())
        ball = (4 / 3 * math.pi * big ** 3 if graph.ndim == 3 else math.pi * big ** 2)
        volume = np.count_nonzero(mask) * float(np.prod(graph.spacing))
        if (np.isfinite(typical) and big > _BLOB_RATIO * typical
                and ball > _BLOB_SHARE * volume):
            out.append(f"one blob of radius {big:.3g} {graph.unit} holds most of the structure, "
                       f"{big / typical:.0f}x thicker than its median branch: the segmentation "
                       "may have merged background into it")
    if graph.n_edges < MIN_BRANCHES:
        out.append(f"only {graph.n_edges} branches: too few for network statistics; check "
                   "the segmentation")
    return out
