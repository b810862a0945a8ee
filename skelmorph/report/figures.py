"""Figures (matplotlib, drawn off-screen).

Every function draws into a given or new Axes and returns the data it drew,
so tests can check the numbers rather than pixels.  The palette is the
colour-blind-safe set of Okabe & Ito (2008, Color Universal Design).
"""

from __future__ import annotations

import numpy as np

__all__ = ["PALETTE", "new_axes", "plot_barcode", "plot_diagram", "plot_profiles", "save"]

PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442", "#000000")


def new_axes(ncols=1, nrows=1, size=(4.0, 3.2), fixed=False):
    """A grid of axes.  ``fixed`` uses fixed margins instead of constrained
    layout, which costs about a second on a many-panel figure."""
    import matplotlib
    matplotlib.use("Agg", force=False)
    # Labels carry user text (group names, sample ids): never parse it as math.
    matplotlib.rcParams["text.parse_math"] = False
    import matplotlib.pyplot as plt
    fig, axes = plt.subplots(nrows, ncols, figsize=(size[0] * ncols, size[1] * nrows),
                             squeeze=False, constrained_layout=not fixed)
    if fixed:
        w, h = size[0] * ncols, size[1] * nrows
        fig.subplots_adjust(left=0.85 / w, right=1 - 0.15 / w, bottom=0.6 / h, top=1 - 0.45 / h,
                            wspace=1.4 / size[0], hspace=1.1 / size[1])
    return fig, axes


def save(fig, path, dpi=110):
    """Save a figure atomically and close it."""
    import matplotlib.pyplot as plt
    from ..io import atomic_path
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=dpi, format="png")
    plt.close(fig)


def plot_barcode(bars, ax, unit="", label="", color=PALETTE[0]):
    """Horizontal bars from death to birth, longest on top; returns the drawn segments."""
    bars = np.asarray(bars, float).reshape(-1, 2)
    order = np.argsort(-np.abs(bars[:, 0] - bars[:, 1]), kind="stable")
    seg = bars[order]
    lo, hi = seg.min(axis=1), seg.max(axis=1)
    y = np.arange(len(seg))[::-1]
    # One polyline broken by NaNs: tens of thousands of bars draw at once.
    xs = np.column_stack([lo, hi, np.full(len(seg), np.nan)]).ravel()
    ys = np.repeat(y.astype(float), 3)
    ys[2::3] = np.nan
    ax.plot(xs, ys, color=color, lw=1.2, solid_capstyle="butt")
    ax.set_xlabel(f"filtration value ({unit})" if unit else "filtration value")
    ax.set_ylabel("bar (longest on top)")
    ax.set_yticks([])
    if label:
        ax.set_title(label)
    return np.column_stack([lo, hi, y])


def plot_diagram(bars, ax, unit="", label="", color=PALETTE[1]):
    """Persistence diagram: death against birth with the diagonal; returns the points."""
    bars = np.asarray(bars, float).reshape(-1, 2)
    ax.scatter(bars[:, 1], bars[:, 0], s=10, color=color, alpha=0.8)
    if len(bars):
        lo, hi = float(bars.min()), float(bars.max())
        ax.plot([lo, hi], [lo, hi], color="0.5", lw=0.8)
    u = f" ({unit})" if unit else ""
    ax.set_xlabel("death" + u)
    ax.set_ylabel("birth" + u)
    if label:
        ax.set_title(label)
    return bars[:, ::-1]


#: Axis labels of the profile columns; "{u}" is replaced by the length unit.
PROFILE_LABELS = {
    "crossings": "crossings", "cut_ends": "cut ends", "total_length": "length ({u})",
    "branch_points": "branch points", "tips": "tips", "branching_pattern": "branch points - tips",
    "leaf_index": "mean leaf index", "tortuosity": "mean tortuosity", "flux_angle": "flux angle (rad)",
    "flux_cosine": "flux cosine", "field": "field ({u}^-2 x charge)", "taper": "radius at cut ({u})",
    "loops": "loops",
}


def plot_profiles(profiles, axes, unit="", labels=None):
    """One small panel per profile column against radius.

    ``profiles`` is one DataFrame or a list of them (one line each, e.g. one
    per sample).  Returns {column: list of (radius, values)} as drawn.
    """
    if not isinstance(profiles, (list, tuple)):
        profiles = [profiles]
    columns = list(PROFILE_LABELS)
    axes = np.asarray(axes).ravel()
    drawn = {}
    for ax, col in zip(axes, columns):
        drawn[col] = []
        for i, prof in enumerate(profiles):
            order = np.argsort(np.asarray(prof["radius"]))
            r = np.asarray(prof["radius"], float)[order]
            y = np.asarray(prof[col], float)[order]
            ax.plot(r, y, color=PALETTE[i % len(PALETTE)], lw=1.2,
                    label=labels[i] if labels else None)
            drawn[col].append((r, y))
        ax.set_xlabel(f"radius ({unit})" if unit else "radius")
        ax.set_ylabel(PROFILE_LABELS[col].format(u=unit or "unit"))
    for ax in axes[len(columns):]:
        ax.set_visible(False)
    if labels:
        axes[0].legend(fontsize=7)
    return drawn


def _group_colours(labels):
    names = sorted(set(map(str, labels)))
    return names, {g: PALETTE[i % len(PALETTE)] for i, g in enumerate(names)}


def plot_group_values(values, labels, ax, name, q=None, unit=None):
    """One measure by group: points with a median bar; returns {group: values drawn}."""
    values = np.asarray(values, float)
    labels = np.asarray(labels).astype(str)
    names, colour = _group_colours(labels)
    drawn = {}
    rng = np.random.default_rng(0)
    for i, g in enumerate(names):
        v = values[(labels == g) & np.isfinite(values)]
        x = i + rng.uniform(-0.15, 0.15, len(v))
        ax.scatter(x, v, s=14, color=colour[g], alpha=0.85)
        if len(v):
            ax.hlines(np.median(v), i - 0.3, i + 0.3, color="0.2", lw=1.5)
        drawn[g] = v
    ax.set_xticks(range(len(names)))
    ax.set_xticklabels(names, fontsize=8)
    title = name if q is None or not np.isfinite(q) else f"{name}\nq = {q:.2g}"
    ax.set_title(title, fontsize=8)
    ax.set_ylabel(name if not unit or unit == "1" else f"{name} ({unit})", fontsize=7)
    ax.tick_params(axis="y", labelsize=7)
    return drawn


def profile_bands(profiles, label_of, column, n_grid=100):
    """Median and interquartile band of a profile column per group on a common grid.

    Returns {group: (grid, q25, median, q75)}.
    """
    from ..descriptors.radial import profiles_on_grid
    grid = np.linspace(0.0, float(profiles["radius"].max()), n_grid)
    samples = [s for s in profiles["sample"].unique() if s in label_of]
    curves = profiles_on_grid(profiles, samples, column, grid)
    groups = np.array([str(label_of[s]) for s in samples])
    out = {}
    for g in sorted(set(groups)):
        ys = curves[groups == g]
        out[g] = (grid, np.percentile(ys, 25, axis=0), np.median(ys, axis=0),
                  np.percentile(ys, 75, axis=0))
    return out


def plot_profile_bands(profiles, label_of, column, ax, unit=""):
    """Median profile per group with its interquartile band; returns the bands drawn."""
    bands = profile_bands(profiles, label_of, column)
    names, colour = _group_colours(list(bands))
    for g in names:
        grid, lo, med, hi = bands[g]
        ax.fill_between(grid, lo, hi, color=colour[g], alpha=0.25, lw=0)
        ax.plot(grid, med, color=colour[g], lw=1.5, label=f"{g} (median, IQR)")
    ax.set_xlabel(f"radius from root ({unit})" if unit else "radius from root")
    ax.set_ylabel(PROFILE_LABELS.get(column, column).format(u=unit or "unit"))
    ax.legend(fontsize=7)
    return bands


def plot_embedding(coords, labels, ax, title):
    """2D embedding coloured by group; returns the coordinates drawn per group."""
    coords = np.asarray(coords, float)
    labels = np.asarray(labels).astype(str)
    names, colour = _group_colours(labels)
    drawn = {}
    for g in names:
        sel = labels == g
        xy = coords[sel] if coords.shape[1] >= 2 else np.column_stack([coords[sel, 0], np.zeros(sel.sum())])
        ax.scatter(xy[:, 0], xy[:, 1], s=18, color=colour[g], label=g)
        drawn[g] = xy
    ax.set_title(title, fontsize=8)
    ax.set_xlabel("axis 1 (distance units)")
    ax.set_ylabel("axis 2 (distance units)")
    ax.legend(fontsize=7)
    return drawn


def plot_dendrogram_heatmap(d, labels, samples=None, max_ticks=60):
    """Average-linkage dendrogram above the distance matrix in leaf order,
    with sample ids on the axes (up to ``max_ticks`` samples) and a legend
    of the group strip.

    Returns the figure; ``fig.skelmorph_order`` holds the leaf order drawn.
    """
    import matplotlib
    matplotlib.use("Agg", force=False)
    matplotlib.rcParams["text.parse_math"] = False
    import matplotlib.pyplot as plt
    from scipy.cluster.hierarchy import dendrogram, linkage
    from scipy.spatial.distance import squareform
    d = np.asarray(d, float)
    labels = np.asarray(labels).astype(str)
    names, colour = _group_colours(labels)
    n = len(d)
    named = samples is not None and n <= max_ticks
    side = 5.2 if not named else min(12.0, max(5.2, 0.16 * n + 2.5))
    fig = plt.figure(figsize=(side, side + 0.6), constrained_layout=True)
    gs = fig.add_gridspec(3, 2, height_ratios=[1, 0.12, 4], width_ratios=[20, 1])
    ax_d = fig.add_subplot(gs[0, 0])
    z = linkage(squareform(d, checks=False), "average")
    dn = dendrogram(z, ax=ax_d, no_labels=True, color_threshold=0, above_threshold_color="0.3")
    ax_d.set_axis_off()
    order = np.array(dn["leaves"])
    ax_g = fig.add_subplot(gs[1, 0])
    from matplotlib.colors import ListedColormap
    ax_g.imshow([[names.index(g) for g in labels[order]]], aspect="auto",
                cmap=ListedColormap([colour[g] for g in names]), vmin=-0.5, vmax=len(names) - 0.5)
    ax_g.set_yticks([])
    ax_g.set_xticks([])
    ax_g.set_ylabel("group", rotation=0, ha="right", fontsize=7)
    from matplotlib.patches import Patch
    ax_d.legend(handles=[Patch(color=colour[g], label=g) for g in names], title="group",
                loc="upper right", fontsize=7, title_fontsize=7, frameon=False,
                bbox_to_anchor=(1.12, 1.0))
    ax_h = fig.add_subplot(gs[2, 0])
    im = ax_h.imshow(d[np.ix_(order, order)], cmap="cividis", aspect="auto")
    if named:
        ids = np.asarray(samples).astype(str)[order]
        ax_h.set_xticks(range(n))
        ax_h.set_xticklabels(ids, rotation=90, fontsize=6)
        ax_h.set_yticks(range(n))
        ax_h.set_yticklabels(ids, fontsize=6)
        ax_h.set_xlabel("sample (dendrogram order)")
    else:
        ax_h.set_xticks([])
        ax_h.set_yticks([])
        ax_h.set_xlabel(f"{n} samples in dendrogram order (ids in distances/*.csv)")
    fig.colorbar(im, cax=fig.add_subplot(gs[2, 1]), label="combined distance (weighted, unitless)")
    fig.skelmorph_order = order
    return fig


def plot_persistence_means(images, shape, x_edges, y_edges, labels, unit=""):
    """Mean persistence image per group on one colour scale; returns the figure."""
    labels = np.asarray(labels).astype(str)
    groups = sorted(set(labels))
    fig, axes = new_axes(len(groups), 1, size=(3.0, 2.8))
    vmax = max(images[labels == g].mean(0).max() for g in groups)
    for ax, g in zip(axes.ravel(), groups):
        mean = images[labels == g].mean(0).reshape(shape)
        im = ax.imshow(mean, origin="lower", cmap="cividis", vmin=0, vmax=vmax, aspect="auto",
                       extent=(x_edges[0], x_edges[-1], y_edges[0], y_edges[-1]))
        ax.set_title(f"{g} (n = {int((labels == g).sum())})", fontsize=8)
        ax.set_xlabel(f"birth ({unit})")
        ax.set_ylabel(f"persistence ({unit})")
    fig.colorbar(im, ax=axes.ravel().tolist(), shrink=0.8, label="mean density")
    return fig


def plot_flow(graph, flow, ax, unit="um"):
    """The centrelines coloured by the log of the flow through each branch
    (3D networks drawn on their two widest axes); returns the line collection."""
    from matplotlib.collections import LineCollection
    from matplotlib.colors import LogNorm
    pts, off = graph.points, graph.offsets
    extent = np.ptp(pts, axis=0) if len(pts) else np.ones(graph.ndim)
    axes2 = np.sort(np.argsort(extent)[::-1][:2])
    segs, vals = [], []
    flow = np.asarray(flow, float)
    for e in range(graph.n_edges):
        if not (np.isfinite(flow[e]) and flow[e] > 0):
            continue
        p = pts[off[e]:off[e + 1]][:, axes2]
        segs.extend(np.stack([p[:-1], p[1:]], axis=1))
        vals.extend([flow[e]] * (len(p) - 1))
    names = "zyx"[-graph.ndim:]
    lc = LineCollection(np.array(segs)[:, :, ::-1] if segs else [], cmap="cividis",
                        linewidths=1.2)
    if vals:
        vals = np.array(vals)
        lc.set_array(vals)
        lc.set_norm(LogNorm(vmin=max(vals.min(), vals.max() * 1e-6), vmax=vals.max()))
    ax.add_collection(lc)
    ax.autoscale()
    ax.set_aspect("equal")
    ax.invert_yaxis()
    ax.set_xlabel(f"{names[axes2[1]]} ({unit})")
    ax.set_ylabel(f"{names[axes2[0]]} ({unit})")
    return lc


def plot_loop_hierarchy(table, ax, unit="um"):
    """The nesting tree of the areoles as a dendrogram: leaves are areoles,
    each join is drawn at the width of the vein whose removal made it
    (Katifori & Magnasco 2012).  Separate trees are joined above the widest
    vein, for display only.  Returns the linkage matrix drawn."""
    from scipy.cluster.hierarchy import dendrogram
    parent = np.asarray(table["parent"])
    leaves = np.asarray(table["areoles"])
    width = np.asarray(table["vein_width"], float)
    n = int(np.count_nonzero(leaves == 1) if len(leaves) else 0)
    if n < 2:
        ax.text(0.5, 0.5, "fewer than two areoles", ha="center", va="center",
                transform=ax.transAxes)
        return np.zeros((0, 4))
    rows = []
    for k in range(n, len(parent)):
        a, b = np.flatnonzero(parent == k)
        rows.append([a, b, width[k], leaves[k]])
    roots = list(np.flatnonzero(parent == -1))
    top = (width.max() if width.max() > 0 else 1.0) * 1.1
    size = {int(r): int(leaves[r]) for r in roots}
    next_id = len(parent)
    while len(roots) > 1:  # join separate trees for display
        a, b = roots.pop(0), roots.pop(0)
        rows.append([a, b, top, size[a] + size[b]])
        size[next_id] = size[a] + size[b]
        roots.append(next_id)
        next_id += 1
    z = np.asarray(rows, float)
    dendrogram(z, ax=ax, no_labels=True, color_threshold=0, above_threshold_color="0.25",
               link_color_func=lambda k: "0.25")
    ax.set_ylabel(f"width of the removed vein ({unit})")
    n_trees = int(np.count_nonzero(parent == -1))
    ax.set_xlabel(f"areoles ({n})" + (f"; {n_trees} separate trees, joined at the top line "
                                       "for display only" if n_trees > 1 else ""))
    if n_trees > 1:
        ax.axhline(top, color="0.6", lw=0.8, ls="--")
    return z


def plot_plate_rod_views(views, spacing, axes, unit="um"):
    """Plates and rods projected along each axis: hue from the plate share
    of the solid along the ray (plate and rod colours of the palette),
    brightness from the amount of solid.  ``views`` as from
    :func:`skelmorph.measure.platerod.plate_rod_projections`; returns the
    three RGB images drawn."""
    from matplotlib.colors import to_rgb
    from matplotlib.patches import Patch
    plate, rod = np.array(to_rgb(PALETTE[1])), np.array(to_rgb(PALETTE[0]))
    names = "zyx"
    images = []
    for axis, (counts, ax) in enumerate(zip(views, axes)):
        p, r = counts[..., 0].astype(float), counts[..., 1].astype(float)
        total = p + r
        share = np.divide(p, total, out=np.zeros_like(p), where=total > 0)[..., None]
        colour = share * plate + (1 - share) * rod
        weight = (np.log1p(total) / max(np.log1p(total.max()), 1e-12))[..., None]
        rgb = 1 - weight * (1 - colour)  # white where there is no solid
        rows, cols = [a for a in range(3) if a != axis]
        ax.imshow(rgb, interpolation="nearest", origin="upper",
                  extent=(0, rgb.shape[1] * spacing[cols], rgb.shape[0] * spacing[rows], 0))
        ax.set_xlabel(f"{names[cols]} ({unit})")
        ax.set_ylabel(f"{names[rows]} ({unit})")
        ax.set_title(f"along {names[axis]}", fontsize=8)
        images.append(rgb)
    axes[0].figure.legend(handles=[Patch(color=plate, label="plate"),
                                   Patch(color=rod, label="rod")],
                          fontsize=7, frameon=False, loc="lower right", ncol=2)
    return images


def plot_vein_orders(graph, orders, ax, unit="um"):
    """Centrelines coloured by vein order class (1°, 2°, 3°, finer), line
    width falling with the order; returns the branches drawn per class."""
    from matplotlib.collections import LineCollection
    from matplotlib.lines import Line2D
    orders = np.minimum(np.asarray(orders, int), 4)
    names = {1: "1° (midrib)", 2: "2°", 3: "3°", 4: "4° and finer", 0: "not reached"}
    colours = {1: PALETTE[5], 2: PALETTE[0], 3: PALETTE[2], 4: PALETTE[4], 0: "0.7"}
    widths = {1: 2.4, 2: 1.6, 3: 1.1, 4: 0.7, 0: 0.5}
    pts, off = graph.points, graph.offsets
    drawn, handles = {}, []
    for k in (0, 4, 3, 2, 1):  # finest first, so that major veins lie on top
        idx = np.flatnonzero(orders == k)
        if not idx.size:
            continue
        segs = [pts[off[e]:off[e + 1]][:, -2:][:, ::-1] for e in idx]
        ax.add_collection(LineCollection(segs, colors=colours[k], linewidths=widths[k]))
        drawn[k] = idx
        handles.append(Line2D([], [], color=colours[k], lw=widths[k], label=names[k]))
    ax.autoscale()
    ax.set_aspect("equal")
    ax.invert_yaxis()
    ax.set_xlabel(f"x ({unit})")
    ax.set_ylabel(f"y ({unit})")
    ax.legend(handles=handles[::-1], fontsize=7, frameon=False, loc="best")
    return drawn
