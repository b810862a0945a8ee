"""Leaf venation measures of a 2D vein network.

Definitions as in the protocols reviewed by Sack L, Scoffoni C (2013). Leaf
venation: structure, function, development, evolution, ecology and
applications in the past, present and future. New Phytol 198:983-1000.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from ..errors import InputError

__all__ = ["venation_measures", "lamina_mask", "areole_shapes", "areole_labels"]


def lamina_mask(veins, region=None):
    """The lamina: the given region, or the vein network's filled outline.

    Returns
    -------
    lamina : bool array
    source : str
        ``'region'`` or ``'network outline'``.
    """
    veins = np.asarray(veins, bool)
    if region is not None:
        region = np.asarray(region)
        if region.shape != veins.shape:
            raise InputError(f"the region mask has shape {region.shape} but the image has "
                             f"{veins.shape}; they must match")
        region = region.astype(bool)
        if not region.any():
            raise InputError("the region mask is empty")
        return region, "region of interest"
    return ndi.binary_fill_holes(veins), "network outline"


def areole_labels(veins, lamina):
    """Areoles: the lamina's gaps between veins (4-connected background) that
    do not touch the lamina's edge or the image border, labelled 1..k (0
    elsewhere).  Returns ``(labels, k)``."""
    labels, n = ndi.label(lamina & ~veins)
    edge = ~lamina
    edge[0, :] = edge[-1, :] = edge[:, 0] = edge[:, -1] = True
    touching = np.unique(labels[ndi.binary_dilation(edge, np.ones((3, 3), bool)) & (labels > 0)])
    keep = np.ones(n + 1, bool)
    keep[0] = False
    keep[touching] = False
    new = np.zeros(n + 1, np.int64)
    new[keep] = np.arange(1, int(keep.sum()) + 1)
    return new[labels], int(keep.sum())


def venation_measures(graph, veins, spacing, unit="um", region=None, origin=None,
                      major_width=None, root=None):
    """Vein length per area, areoles, free-ending veinlets and loop density.

    Parameters
    ----------
    graph : SkeletonGraph (2D)
    veins : bool array (2D)
        The segmented veins.
    spacing : (2,) float
    region : bool array, optional
        The lamina (the region of interest); default the vein network's
        filled outline.
    origin : (2,) int, optional
        Voxel index of ``veins[0, 0]`` in the image the graph's coordinates
        refer to (when the arrays are a crop of it).
    major_width : float, optional
        Vein width (``unit``) from which a vein counts as major: VLA is then
        also given for major and minor veins (``major_VLA``, ``minor_VLA``;
        Sack & Scoffoni 2013 call 1-3 degree veins major and the finer
        orders minor; the width that separates them depends on the leaf and
        is the user's to give).  A vein's width is twice its
        volume-equivalent radius.
    root : int, optional
        The node at the leaf base.  With it, every branch gets a vein order
        (:func:`skelmorph.measure.veinorders.vein_orders`) and the summary
        has VLA and mean width per order class (``VLA_1``, ``VLA_2``,
        ``VLA_3``, ``VLA_higher``; ``mean_width_1`` ...) and the number of
        2° veins; the orders are returned in ``branch_orders``.

    Returns
    -------
    dict
        ``VLA`` (vein length inside the lamina per lamina area, unit^-1),
        ``areole_count`` (background regions inside the lamina enclosed by
        veins, 4-connected, not touching the lamina edge or image border),
        ``areole_density`` (per unit^2), ``mean_areole_area`` (unit^2),
        ``free_ending_veinlets`` (tips inside the lamina, farther than their
        radius plus two pixels from its edge), ``lamina_area`` and
        ``lamina_source``.  Units are in :mod:`skelmorph.results`.
    """
    veins = np.asarray(veins, bool)
    if veins.ndim != 2 or graph.ndim != 2:
        raise InputError(f"venation measures need a 2D image; this one is {veins.ndim}D")
    spacing = np.asarray(spacing, float)
    pixel = float(np.prod(spacing))
    shift = np.zeros(2) if origin is None else np.asarray(origin, float) * spacing
    lamina, source = lamina_mask(veins, region)
    area = float(np.count_nonzero(lamina)) * pixel
    # Vein length inside the lamina: polyline segments whose midpoint is inside.
    from ..polyline import edge_index
    eid = edge_index(graph.offsets)
    pts = graph.points - shift
    same = eid[1:] == eid[:-1]
    mid = 0.5 * (pts[1:] + pts[:-1])
    idx = np.clip(np.round(mid / spacing).astype(int), 0, np.array(veins.shape) - 1)
    inside = lamina[idx[:, 0], idx[:, 1]] & same
    steps = np.linalg.norm(np.diff(pts, axis=0), axis=1)
    length = float(steps[inside].sum())
    split = {}
    if major_width is not None:
        major = (2.0 * np.asarray(graph.branch_radius(), float) * np.ones(graph.n_edges)
                 >= float(major_width))[eid[:-1]]
        major_length = float(steps[inside & major].sum())
        split = {"major_VLA": major_length / area if area > 0 else float("nan"),
                 "minor_VLA": (length - major_length) / area if area > 0 else float("nan")}
    if root is not None:
        from .veinorders import N_CLASSES, vein_orders
        orders, starts = vein_orders(graph, root, return_starts=True)
        cls = np.clip(orders, 0, N_CLASSES)
        width = 2.0 * np.asarray(graph.branch_radius(), float) * np.ones(graph.n_edges)
        seg_cls = cls[eid[:-1]]
        seg_w = width[eid[:-1]]
        for k in range(1, N_CLASSES + 1):
            name = str(k) if k < N_CLASSES else "higher"
            sel = inside & (seg_cls == k)
            split[f"VLA_{name}"] = float(steps[sel].sum()) / area if area > 0 else float("nan")
            if k < N_CLASSES:
                w = steps[sel]
                split[f"mean_width_{k}"] = (float((seg_w[sel] * w).sum() / w.sum())
                                            if w.sum() > 0 else float("nan"))
        split["n_secondary_veins"] = int(np.count_nonzero(starts & (orders == 2)))
        split["branch_orders"] = orders
    # Areoles: enclosed background components.
    labels, n = areole_labels(veins, lamina)
    areole_areas = np.bincount(labels.ravel(), minlength=n + 1)[1:] * pixel
    # Free-ending veinlets: tips well inside the lamina.
    depth = ndi.distance_transform_edt(np.pad(lamina, 1), sampling=spacing)[1:-1, 1:-1]
    tips = np.flatnonzero(graph.node_degree == 1)
    t_idx = np.clip(np.round((graph.nodes[tips] - shift) / spacing).astype(int), 0, np.array(veins.shape) - 1)
    inner = depth[t_idx[:, 0], t_idx[:, 1]] > graph.node_radius[tips] + 2 * spacing.max()
    return {
        "VLA": length / area if area > 0 else float("nan"),
        "areole_count": int(len(areole_areas)),
        "areole_density": len(areole_areas) / area if area > 0 else float("nan"),
        "mean_areole_area": float(areole_areas.mean()) if len(areole_areas) else float("nan"),
        "free_ending_veinlets": int(inner.sum()),
        "lamina_area": area,
        "lamina_source": source,
        **split,
    }


def areole_shapes(veins, spacing, region=None):
    """Area, perimeter and circularity of every areole.

    The perimeter is the Crofton estimate over four directions (Lehmann G,
    Legland D (2012) Efficient N-dimensional surface estimation using Crofton
    formula and run-length encoding. Insight J; scikit-image's
    ``perimeter_crofton``), within 1 % on digitised discs where counting
    boundary steps reads 4-5 % high, but about 6 % short on edges along the
    pixel axes; circularity is 4 pi A / P^2 (1 for a disc, pi/4 for a
    square, which reads about 0.89 when aligned with the pixels).  Perimeters need square pixels: with
    anisotropic pixels they are NaN.

    Returns
    -------
    summary : dict
        ``mean_areole_perimeter`` and ``mean_areole_circularity``.
    table : dict of arrays
        ``areole``, ``area``, ``perimeter``, ``circularity`` (one row per areole).
    """
    from skimage.measure import regionprops

    veins = np.asarray(veins, bool)
    spacing = np.asarray(spacing, float)
    lamina, _ = lamina_mask(veins, region)
    labels, n = areole_labels(veins, lamina)
    area = np.bincount(labels.ravel(), minlength=n + 1)[1:] * float(np.prod(spacing))
    perimeter = np.full(n, np.nan)
    if n and np.isclose(spacing[0], spacing[1], rtol=1e-6):
        for r in regionprops(labels):  # one entry per areole, not per pixel
            perimeter[r.label - 1] = r.perimeter_crofton * spacing[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        circ = 4 * np.pi * area / perimeter ** 2
    summary = {
        "mean_areole_perimeter": float(np.nanmean(perimeter)) if np.isfinite(perimeter).any()
        else float("nan"),
        "mean_areole_circularity": float(np.nanmean(circ)) if np.isfinite(circ).any()
        else float("nan"),
    }
    return summary, {"areole": np.arange(1, n + 1), "area": area, "perimeter": perimeter,
                     "circularity": circ}
