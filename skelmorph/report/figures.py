"""Figures (matplotlib, drawn off-screen).

Every function draws into a given or new Axes and returns the data it drew,
so tests can check the numbers rather than pixels.  The palette is the
colour-blind-safe set of Okabe & Ito (2008, Color Universal Design).
"""

from __future__ import annotations

import numpy as np

__all__ = ["PALETTE", "new_axes", "plot_barcode", "plot_diagram", "plot_profiles", "save"]

PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442", "#000000")


def new_axes(ncols=1, nrows=1, size=(4.0, 3.2)):
    import matplotlib
    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    fig, axes = plt.subplots(nrows, ncols, figsize=(size[0] * ncols, size[1] * nrows),
                             squeeze=False, constrained_layout=True)
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
    ax.hlines(y, lo, hi, color=color, lw=1.2)
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
