"""Sample pictures for the report gallery: the centrelines coloured by radius,
rendered off-screen with pyvista when it can render here, else with
matplotlib; beside them, for samples with the vessel set, the centrelines
coloured by modelled flow.  One colour scale per study for each."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..io import atomic_path, write_json

__all__ = ["render_thumbnail", "render_flow_thumbnail", "gallery"]


_PYVISTA_OK = None
_PROBE = """
import pyvista as pv
p = pv.Plotter(off_screen=True, window_size=(64, 64))
p.add_mesh(pv.Sphere())
p.screenshot(None, return_img=True)
"""


def _pyvista_works():
    """Whether pyvista can render off-screen here, probed once in a child
    process (a missing OpenGL stack can crash the renderer outright)."""
    global _PYVISTA_OK
    if _PYVISTA_OK is None:
        import importlib.util
        import subprocess
        import sys
        if importlib.util.find_spec("pyvista") is None:
            _PYVISTA_OK = False
        else:
            try:
                res = subprocess.run([sys.executable, "-c", _PROBE], capture_output=True,
                                     timeout=60)
                _PYVISTA_OK = res.returncode == 0
            except (OSError, subprocess.TimeoutExpired):
                _PYVISTA_OK = False
    return _PYVISTA_OK


def _render_pyvista(graph, path, px=300, clim=None):
    """Off-screen 3D view of the centrelines as tubes coloured by radius (pyvista)."""
    import pyvista as pv
    import vtk
    vtk.vtkObject.GlobalWarningDisplayOff()
    if hasattr(vtk, "vtkLogger"):  # keep the renderer's display messages off the terminal
        vtk.vtkLogger.SetStderrVerbosity(vtk.vtkLogger.VERBOSITY_OFF)
    poly = graph.to_vtk()
    u = graph.unit
    lo, hi = clim or (float(graph.point_radius.min()), float(graph.point_radius.max()))
    p = pv.Plotter(off_screen=True, window_size=(px, px))
    p.set_background("white")
    tube = poly.tube(radius=max(0.3 * float(np.median(graph.point_radius)), 1e-6))
    p.add_mesh(tube, scalars="radius", cmap="cividis", clim=(lo, hi if hi > lo else lo + 1),
               scalar_bar_args={"title": f"radius ({u})", "color": "black", "vertical": False,
                                "position_x": 0.2, "position_y": 0.03, "width": 0.6,
                                "height": 0.08, "title_font_size": 16, "label_font_size": 14,
                                "n_labels": 2, "fmt": "%.2g"})
    # The box size in words instead of axis ticks, which are unreadable at this size.
    extent = " x ".join(f"{v:.3g}" for v in np.ptp(graph.points, axis=0)[::-1])
    p.add_text(f"x y z extent: {extent} {u}", position="upper_left", font_size=9,
               color="black")
    p.camera_position = "iso"
    path = Path(path)
    with atomic_path(path) as tmp:
        p.screenshot(str(tmp) + ".png")
        Path(str(tmp) + ".png").replace(tmp)
    p.close()
    return lo, hi


def render_thumbnail(graph, path, image=None, size=(4.0, 4.0), dpi=90, clim=None):
    """A small picture of a skeleton graph coloured by radius.

    3D: the centrelines as tubes rendered off-screen with pyvista when it
    can render on this machine, else a matplotlib perspective view; 2D: the
    graph drawn over the image.  ``clim`` fixes the colour scale (one per
    study); by default it is the graph's radius range.  Returns the
    (min, max) of the colour scale.
    """
    if graph.ndim == 3 and graph.n_edges and _pyvista_works():
        try:
            return _render_pyvista(graph, path, px=int(size[0] * dpi), clim=clim)
        except Exception:  # fall back to matplotlib below
            pass
    import matplotlib
    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    from matplotlib.collections import LineCollection

    from .figures import save
    pts, off, r = graph.points, graph.offsets, graph.point_radius
    segs, vals = [], []
    for e in range(graph.n_edges):
        p = pts[off[e]:off[e + 1]]
        q = r[off[e]:off[e + 1]]
        segs.extend(np.stack([p[:-1], p[1:]], axis=1))
        vals.extend(0.5 * (q[:-1] + q[1:]))
    segs = np.array(segs).reshape(-1, 2, graph.ndim)
    vals = np.array(vals)
    r_all = graph.point_radius
    lo, hi = clim or ((float(r_all.min()), float(r_all.max())) if len(r_all) else (0.0, 1.0))
    u = graph.unit
    if graph.ndim == 3:
        from mpl_toolkits.mplot3d.art3d import Line3DCollection
        fig = plt.figure(figsize=size)
        ax = fig.add_subplot(projection="3d")
        lc = Line3DCollection(segs[:, :, ::-1], cmap="cividis", linewidths=1.0)
        lc.set_array(vals)
        lc.set_clim(lo, hi if hi > lo else lo + 1)
        ax.add_collection(lc)
        if len(segs):
            for k, setter in enumerate((ax.set_xlim, ax.set_ylim, ax.set_zlim)):
                c = segs[:, :, 2 - k]
                setter(float(c.min()), float(c.max()) + 1e-9)
        ax.set_xlabel(f"x ({u})", fontsize=7)
        ax.set_ylabel(f"y ({u})", fontsize=7)
        ax.set_zlabel(f"z ({u})", fontsize=7)
        ax.tick_params(labelsize=6)
        for axis in (ax.xaxis, ax.yaxis, ax.zaxis):
            axis.set_major_locator(matplotlib.ticker.MaxNLocator(3))
    else:
        fig, ax = plt.subplots(figsize=size)
        if image is not None:
            sy, sx = graph.spacing
            ax.imshow(np.asarray(image), cmap="gray", origin="upper",
                      extent=(-sx / 2, (image.shape[1] - 0.5) * sx, (image.shape[0] - 0.5) * sy,
                              -sy / 2))
        lc = LineCollection(segs[:, :, ::-1], cmap="cividis", linewidths=1.2)
        lc.set_array(vals)
        lc.set_clim(lo, hi if hi > lo else lo + 1)
        ax.add_collection(lc)
        ax.autoscale()
        ax.set_aspect("equal")
        if image is None:
            ax.invert_yaxis()
        ax.set_xlabel(f"x ({u})", fontsize=7)
        ax.set_ylabel(f"y ({u})", fontsize=7)
        ax.tick_params(labelsize=6)
    cb = fig.colorbar(lc, ax=ax, shrink=0.6)
    cb.set_label(f"radius ({u})", fontsize=7)
    cb.ax.tick_params(labelsize=6)
    save(fig, path, dpi=dpi)
    return lo, hi


def gallery(study, cohort, labels, folder, max_gallery):
    """Thumbnails of up to ``max_gallery`` samples, spread over the groups."""
    from ..graph import SkeletonGraph
    folder.mkdir(parents=True, exist_ok=True)
    picked = []
    groups = sorted(set(labels))
    per = max(1, max_gallery // max(len(groups), 1))
    for g in groups:
        picked += [i for i in np.flatnonzero(labels == g)[:per]]
    graphs = {}
    for i in picked:
        try:
            graphs[i] = SkeletonGraph.read(_graph_file(study / "samples" / cohort["sample"].iloc[i]))
        except Exception:  # a sample without a readable graph gets no picture
            continue
    radii = [g.point_radius for g in graphs.values() if len(g.point_radius)]
    # One colour scale for the study: the 1st-99th percentile of all radii shown.
    clim = (tuple(float(v) for v in np.percentile(np.concatenate(radii), [1, 99]))
            if radii else None)
    def radius_picture(i, graph, thumb):
        image = None
        if graph.ndim == 2:
            try:
                from ..io import read_image
                image = np.asarray(read_image(cohort["path"].iloc[i]).array)
            except Exception:
                image = None
        render_thumbnail(graph, thumb, image=image, clim=clim)

    items, jobs = [], []
    for i, graph in graphs.items():
        s = cohort["sample"].iloc[i]
        jobs.append((folder / f"{s}.png", lambda t, i=i, g=graph: radius_picture(i, g, t)))
        items.append((s, labels[i], f"figures/gallery/{s}.png"))
    _render_on_scale(folder / "colour-scale.json", clim, jobs)
    flow_pictures = _flow_gallery(study, cohort, graphs, folder)
    return [(s, g, src, flow_pictures.get(s)) for s, g, src in items]


def _flow_gallery(study, cohort, graphs, folder):
    """Pictures coloured by the modelled flow of samples that have one
    (the vessel set's ``flow`` column), on one log colour scale per study."""
    import pandas as pd
    flows = {}
    for i, graph in graphs.items():
        s = cohort["sample"].iloc[i]
        table = study / "samples" / s / "branches.csv"
        try:
            columns = pd.read_csv(table, nrows=0).columns
            if "flow" in columns:
                f = pd.read_csv(table, usecols=["flow"])["flow"].to_numpy(float)
                if len(f) == graph.n_edges:
                    flows[s] = (graph, f)
        except Exception:  # no table, no flow picture
            continue
    if not flows:
        return {}
    positive = np.concatenate([f[np.isfinite(f) & (f > 0)] for _, f in flows.values()])
    if not len(positive):
        return {}
    clim = [float(v) for v in np.percentile(positive, [1, 99])]
    _render_on_scale(folder / "flow-colour-scale.json", clim,
                     [(folder / f"{s}-flow.png",
                       lambda t, g=graph, f=f: render_flow_thumbnail(g, f, t, clim))
                      for s, (graph, f) in flows.items()])
    return {s: f"figures/gallery/{s}-flow.png" for s in flows}


def _render_on_scale(scale_file, clim, jobs):
    """Render each ``(path, render)`` job whose picture is missing, or all of
    them when the study's colour scale changed; then record the scale."""
    same = scale_file.exists() and json.loads(scale_file.read_text()) == list(clim or [])
    for path, render in jobs:
        if not (path.exists() and same):
            render(path)
    write_json(scale_file, list(clim or []))


def render_flow_thumbnail(graph, flow, path, clim, size=(4.0, 4.0), dpi=90):
    """The centrelines coloured by modelled flow on a fixed log scale ``clim``."""
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.colors import LogNorm

    from .figures import new_axes, plot_flow, save
    fig, ax = new_axes(1, 1, size=size, fixed=True)
    lc = plot_flow(graph, flow, ax[0, 0], unit=graph.unit)
    lo, hi = clim
    lc.set_norm(LogNorm(vmin=lo, vmax=hi if hi > lo else lo * 10))
    ax[0, 0].tick_params(labelsize=6)
    from matplotlib.ticker import FuncFormatter, NullFormatter

    from ..results import format_value
    cb = fig.colorbar(lc, ax=ax[0, 0], shrink=0.6)
    cb.set_label("flow (Poiseuille model)", fontsize=7)
    cb.ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: format_value(v, 2)))
    cb.ax.yaxis.set_minor_formatter(NullFormatter())
    cb.ax.tick_params(labelsize=6)
    save(fig, path, dpi=dpi)


def _graph_file(folder):
    for name in ("graph.npz", "graph.json"):
        if (folder / name).exists():
            return folder / name
    raise FileNotFoundError(folder)
