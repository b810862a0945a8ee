"""Benchmarks: every capability, with ratios against references measured in the same run.

- thinning: our distance-ordered thinning (1 and 2 threads) against
  scikit-image's on foam phantoms, with peak memory of each (measured in a
  child process), and the whole default ``analyze`` (graph, trees, profiles,
  files) against scikit-image's thinning of the same volume;
- pipeline: each stage on foam phantoms against the thinning itself,
  scipy's full distance transform and a KD-tree radius search;
- trees: elder-rule barcodes on trees of 10^4-10^6 points against the same
  barcode from gudhi's persistence, and spanning trees of the foam graph;
- profiles: radial profiles with 10 and 1000 radii on a 10^6-point tree and
  the foam graph, against recomputing the ball's component per radius;
- measures: the bone set (each part; local thickness against painting every
  voxel and against one distance transform), vessel and venation measures;
- cohort: 24 foam samples of 128^3 with 1 and 2 workers, a no-op re-run, and
  profile distance matrices for 1000 synthetic samples;
- scans: ``measures='all'`` against the vessel set alone on a sparse 3D
  volume (pyvista's frog blood label), with and without the automatic ROI,
  time and peak memory; the vessel enhancement filter per megapixel/voxel
  against one Gaussian filter, and the automatic field of view;
- compare: ``cohort compare`` on the demo study with exact barcode matchings
  and scikit-learn's permutation test (the earlier method) against the sliced
  Wasserstein distance and our fold loop (wall and CPU time, same findings),
  and the sliced distance's error and speed against the exact one;
- edt: our exact anisotropic distance transform against scipy's and the
  ``edt`` package (when installed);
- platerod: the surface thinning against the curve thinning, the plate and
  rod decomposition against the curve thinning, and direct Tb.N against
  Tb.Sp (both local thickness), on the rod foam and a foam with plates;
- loops: the hierarchical loop decomposition of grid leaves of 10^3 and 10^4
  areoles, against labelling the areoles and building the graph;
- chunks: the default analysis of tiled foams in slabs under a memory limit,
  against the same analysis in memory and our thinning of the whole volume
  (wall, CPU, peak memory; 1024^3 with ``--chunk-sizes 256 512 1024``);
- memory: peak memory per voxel of ``analyze --measures bone`` on foams
  (child processes), against our thinning alone;
- flow: the Poiseuille/Kirchhoff solve on the foam graph and 10^5-branch
  lattices, against a sparse product and a dense solve;
- report: the demo study's page, and a synthetic 1000-sample study (time and size);
- paths: path counts up to the practical length on the foam graph and a
  10^5-node lattice, and the poset invariants against building the order
  complex explicitly (gudhi) where that finishes.

Usage:

    python scripts/bench.py [--large] [--sizes 128 256] [--only pipeline trees]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import ndimage as ndi

import skelmorph as sm
from skimage.measure import euler_number

from skelmorph.build import centreline_radius
from skelmorph.io import write_tiff
from skelmorph.phantoms import foam
from skelmorph.skeleton import skeletonize


def clock(fn, *args, **kwargs):
    t0 = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - t0


def bench_pipeline(size, tmp):
    ph = foam(size=float(size), cell=16.0, rod_radius=2.5, seed=0)
    path = Path(tmp) / f"foam{size}.tif"
    write_tiff(path, ph.mask, ph.spacing)
    (img, spacing, _), t_read = clock(sm.read_image, path)
    mask = np.asarray(img) > 0
    t = {}
    graph, _ = clock(sm.skeleton_graph, mask, spacing, timings=t)
    _, t_measure = clock(sm.summarize, graph)
    coords = np.argwhere(skeletonize(mask))
    n_vox = len(coords)
    _, t_edt = clock(ndi.distance_transform_edt, mask)
    _, t_kd = clock(centreline_radius, mask, coords, spacing, method="kdtree")
    _, t_euler_ref = clock(euler_number, skeletonize(mask), connectivity=3)
    t.setdefault("restore", 0.0)  # only scikit-image's thinning needs the restore step
    ours = t["restore"] + t["graph"] + t["radii"] + t["topology"] + t_measure
    print(f"\nfoam {size}^3: {n_vox} centreline voxels, {graph.n_edges} branches, "
          f"{graph.cycle_rank} loops")
    print(f"  read {t_read:6.3f} s | skeletonize {t['skeletonize']:6.3f} s | restore {t['restore']:6.3f} s"
          f" | graph {t['graph']:6.3f} s | radii {t['radii']:6.3f} s | loop check {t['topology']:6.3f} s"
          f" | measures {t_measure:6.3f} s")
    print(f"  (restore + graph + radii + loop check + measures) / skeletonize = {ours / t['skeletonize']:5.2f}")
    print(f"  graph time per million centreline voxels = {t['graph'] / n_vox * 1e6:6.2f} s")
    print(f"  radii (read from the thinning's distance map) {t['radii']:.3f} s vs KD-tree {t_kd:.3f} s "
          f"(x{t_kd / t['radii']:.1f}) vs full distance transform {t_edt:.3f} s "
          f"(x{t_edt / t['radii']:.1f})")
    print(f"  loop check: sparse Euler characteristic {t['topology']:.3f} s vs scikit-image "
          f"euler_number {t_euler_ref:.3f} s (x{t_euler_ref / t['topology']:.1f})")
    return {"size": size, "voxels": n_vox, "ratio": ours / t["skeletonize"], "graph": graph}


def _peak_rss_of(code):
    """Run ``code`` in a fresh interpreter; return (seconds it printed, its peak RSS in MB)."""
    import subprocess
    # VmHWM (not ru_maxrss, which a child inherits from its parent across exec).
    code += ("; print([l.split()[1] for l in open('/proc/self/status') "
             "if l.startswith('VmHWM')][0])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    lines = out.stdout.strip().splitlines()
    return float(lines[-2]), float(lines[-1]) / 1024


def bench_thinning(size, tmp):
    """Our thinning against scikit-image's, and the whole analyze against thinning."""
    import numba
    from skelmorph.thinning import thin

    ph = foam(size=float(size), cell=16.0, rod_radius=2.5, seed=0)
    mask = ph.mask
    thin(np.ascontiguousarray(mask[:24, :24, :24]))  # compile / load the kernels
    n_threads = numba.get_num_threads()
    numba.set_num_threads(1)
    _, t_one = clock(thin, mask)
    numba.set_num_threads(n_threads)
    sk_ours, t_two = clock(thin, mask)
    sk_ref, t_ref = clock(skeletonize, mask, method="lee")
    print(f"\nthinning foam {size}^3 ({mask.mean():.0%} solid): ours 1 thread {t_one:.2f} s, "
          f"{n_threads} threads {t_two:.2f} s | scikit-image (Lee) {t_ref:.2f} s | "
          f"ratio 1 thread x{t_ref / t_one:.2f}, {n_threads} threads x{t_ref / t_two:.2f}")
    print(f"  centreline voxels: ours {int(sk_ours.sum())}, scikit-image {int(sk_ref.sum())}; "
          f"Euler number mask {euler_number(mask, 3)}, ours {euler_number(sk_ours, 3)}, "
          f"scikit-image {euler_number(sk_ref, 3)}")
    path = Path(tmp) / f"foam{size}.npy"
    np.save(path, mask)
    load = f"import numpy as np, time; m = np.load({str(path)!r})"
    t_o, mem_o = _peak_rss_of(load + "; from skelmorph.thinning import thin; thin(m[:24,:24,:24].copy());"
                              " t=time.perf_counter(); thin(m); print(time.perf_counter()-t)")
    t_s, mem_s = _peak_rss_of(load + "; from skimage.morphology import skeletonize;"
                              " t=time.perf_counter(); skeletonize(m); print(time.perf_counter()-t)")
    print(f"  peak memory (child process, incl. interpreter): ours {mem_o:.0f} MB, "
          f"scikit-image {mem_s:.0f} MB; mask {mask.nbytes / 2**20:.0f} MB")
    out = Path(tmp) / f"analyze{size}"
    res, t_an = clock(sm.analyze, mask, (1.0, 1.0, 1.0), out=out)
    print(f"  whole analyze (graph, tree, barcode, profiles, files): {t_an:.2f} s = "
          f"x{t_an / t_ref:.2f} scikit-image's thinning (target <= 1.5); stages: "
          + ", ".join(f"{k} {v:.2f}" for k, v in res.timings.items()))


def random_skeleton_tree(n, seed=0):
    """A tree shaped like a skeleton: long chains (98 % of points continue the
    previous one) with branches from random earlier points, random-walk coordinates."""
    from skelmorph._kernels import accumulate_down
    rng = np.random.default_rng(seed)
    idx = np.arange(n)
    parent = np.where(rng.random(n) < 0.98, idx - 1, (rng.random(n) * idx).astype(np.int64))
    parent[0] = -1
    order = np.arange(n)
    coords = np.column_stack([accumulate_down(order, parent, rng.normal(size=n)) for _ in range(3)])
    return parent, coords


def bench_trees(graph):
    from skelmorph import Tree, barcode, spanning_trees
    import gudhi

    parent, coords = random_skeleton_tree(1000)
    t0 = time.perf_counter()
    barcode(Tree.from_parents(parent, coords), "path")
    print(f"\nbarcodes: JIT warm-up (first call, compiled kernels cached on disk) "
          f"{time.perf_counter() - t0:.2f} s")
    for n in (10**4, 10**5, 10**6):
        parent, coords = random_skeleton_tree(n, seed=1)
        tree, t_tree = clock(Tree.from_parents, parent, coords)
        bars, t_bar = clock(barcode, tree, "path")
        ours = t_tree + t_bar
        line = (f"  {n:>8} points: tree {t_tree:.3f} s + barcode {t_bar:.3f} s = "
                f"{n / ours / 1e6:.2f} M points/s, {len(bars)} bars")
        if n <= 10**5:
            def gudhi_bars():
                st = gudhi.SimplexTree()
                f = tree.path_distance
                st.insert_batch(np.arange(n)[None, :], -f)
                child = np.flatnonzero(tree.parent >= 0)
                e = np.vstack([child, tree.parent[child]])
                st.insert_batch(e, -np.minimum(f[child], f[tree.parent[child]]))
                return st.persistence(min_persistence=-1)
            _, t_ref = clock(gudhi_bars)
            line += f" | gudhi persistence {t_ref:.3f} s (x{t_ref / ours:.1f} ours)"
        print(line)
    if graph is not None:
        print(f"spanning trees of the foam graph ({graph.n_nodes} nodes, {graph.n_edges} "
              f"branches, {len(graph.points)} points):")
        for method in ("shortest", "minimum", "widest", "random"):
            trees, t = clock(spanning_trees, graph, None, method, 4 if method == "random" else 1)
            per = t / len(trees)
            bars, t_b = clock(barcode, trees[0], "radial")
            print(f"  {method:8s} {per:.3f} s per tree ({trees[0].n_points / per / 1e6:.2f} M points/s)"
                  f" + barcode {t_b:.4f} s")


def per_radius_length(obj, root, radii):
    """Reference: for each radius, clip every segment to the ball and find the
    centre's component again (scipy connected components), for total length."""
    from scipy import sparse
    from scipy.sparse.csgraph import connected_components
    from skelmorph.descriptors.radial import _from_graph, _from_tree
    s = _from_tree(obj) if root is None else _from_graph(obj, root)
    c = s.pts[s.root]
    d = np.linalg.norm(s.pts - c, axis=1)
    a, b = s.seg[:, 0], s.seg[:, 1]
    n = len(d)
    out = []
    for r in radii:
        inside = d <= r
        full = inside[a] & inside[b]
        g = sparse.coo_matrix((np.ones(full.sum()), (a[full], b[full])), shape=(n, n))
        _, lab = connected_components(g, directed=False)
        comp = inside & (lab == lab[s.root])
        length = np.linalg.norm(s.pts[a[full & comp[a]]] - s.pts[b[full & comp[a]]], axis=1).sum()
        part = comp[a] ^ comp[b]
        u = np.where(comp[a[part]], a[part], b[part])
        v = np.where(comp[a[part]], b[part], a[part])
        du, w = s.pts[v] - s.pts[u], s.pts[u] - c
        A, B, C = (du * du).sum(1), (w * du).sum(1), (w * w).sum(1) - r * r
        t = np.clip((-B + np.sqrt(np.maximum(B * B - A * C, 0))) / np.where(A > 0, A, 1), 0, 1)
        out.append(length + (t * np.sqrt(A)).sum())
    return np.array(out)


def bench_profiles(graph):
    from skelmorph import Tree, radial_profiles
    parent, coords = random_skeleton_tree(10**6, seed=2)
    radial_profiles(Tree.from_parents(*random_skeleton_tree(1000)), n_radii=5)  # JIT warm-up
    print("\nradial profiles (every column at every radius; trees built afresh in each timing):")

    def tree_profiles(root=None, n_radii=10):
        return radial_profiles(Tree.from_parents(parent, coords), n_radii=n_radii)

    tree_profiles()  # first-touch memory
    for name, obj, root, n in (("10^6-point tree", None, None, len(parent)),
                               ("foam graph", graph, int(np.argmax(graph.node_radius)),
                                len(graph.points))):
        fn = tree_profiles if obj is None else (lambda root, n_radii: radial_profiles(
            graph, root=root, n_radii=n_radii))
        p10, t10 = clock(fn, root=root, n_radii=10)
        p1000, t1000 = clock(fn, root=root, n_radii=1000)
        if obj is None:
            obj = Tree.from_parents(parent, coords)
        radii = p10["radius"].to_numpy()
        ref, t_ref = clock(per_radius_length, obj, root, radii)
        err = np.max(np.abs(ref - p10["total_length"].to_numpy()))
        print(f"  {name} ({n} points): 10 radii {t10:.3f} s, 1000 radii {t1000:.3f} s "
              f"(ratio {t1000 / t10:.2f}); {n / t1000 / 1e6:.2f} M points/s at 1000 radii")
        print(f"    per-radius recompute of length only: {t_ref / len(radii):.3f} s per radius, "
              f"so 1000 radii ~{t_ref / len(radii) * 1000:.1f} s -> one sweep is "
              f"x{t_ref / len(radii) * 1000 / t1000:.0f} faster; max length difference {err:.2e}")


def bench_measures(size):
    from skelmorph.measure.thickness import local_thickness
    from skelmorph.measure.bone import edge_corrected_euler, mil_fabric, surface_and_smi
    from skelmorph.measure.vessel import vessel_measures
    from skelmorph.measure.venation import venation_measures
    ph = foam(size=float(size), cell=16.0, rod_radius=2.5, seed=0)
    m, sp = ph.mask, ph.spacing
    dist, t_edt = clock(ndi.distance_transform_edt, m, sampling=sp)
    _, t_th = clock(local_thickness, m, sp, dist=dist)
    _, t_th_all = (None, None) if size > 128 else clock(local_thickness, m, sp, "all", dist)
    _, t_sp = clock(local_thickness, ~m, sp)
    _, t_smi = clock(surface_and_smi, m, sp)
    _, t_chi = clock(edge_corrected_euler, m)
    _, t_mil = clock(mil_fabric, m, sp)
    print(f"\nbone set, foam {size}^3 ({m.mean():.2f} solid):")
    line = (f"  distance transform {t_edt:.2f} s | Tb.Th {t_th:.2f} s (x{t_th / t_edt:.2f} the "
            f"transform)")
    if t_th_all is not None:
        line += f" vs painting every voxel {t_th_all:.2f} s (x{t_th_all / t_th:.1f} slower)"
    print(line)
    from skelmorph.measure import thickness
    ridge_dist = dist.astype(np.float32)
    n_digital = len(thickness.ridge_centres(ridge_dist, sp))
    table = thickness.RIDGE_TABLE_OFFSETS
    thickness.RIDGE_TABLE_OFFSETS = 1  # the geometric test r(n) >= r(c) + |n - c| alone
    try:
        n_geometric = len(thickness.ridge_centres(ridge_dist, sp))
        _, t_th_geo = clock(local_thickness, m, sp, dist=dist)
    finally:
        thickness.RIDGE_TABLE_OFFSETS = table
    print(f"  ridge centres: {n_digital / m.sum():.2f} of the solid with digital containment vs "
          f"{n_geometric / m.sum():.2f} with the geometric test; Tb.Th x{t_th_geo / t_th:.2f} faster")
    # The space around the surface skeleton (direct Tb.N): centres painting
    # only the crescent outside a neighbour's ball, against whole balls.
    from skelmorph.thinning import thin
    free = ~thin(m, sp, keep="surfaces")
    free_dist = ndi.distance_transform_edt(free, sampling=sp).astype(np.float32)
    crescent, t_cres = clock(local_thickness, free, sp, dist=free_dist)
    thickness.PAINT_CRESCENTS = False
    try:
        whole, t_whole = clock(local_thickness, free, sp, dist=free_dist)
    finally:
        thickness.PAINT_CRESCENTS = True
    print(f"  space around the surface skeleton: crescents {t_cres:.2f} s vs whole balls "
          f"{t_whole:.2f} s (x{t_whole / t_cres:.2f}), same map: {np.array_equal(crescent, whole)}")
    # BS from counted cube configurations against meshing the image.
    from skimage.measure import marching_cubes
    from skelmorph.measure.cubes import binary_surface_area
    binary_surface_area(m[:4], sp)  # compiled and tabled before the clock
    bs_counts, t_counts = clock(binary_surface_area, m, sp)
    (verts, faces, _, _), t_mesh = clock(marching_cubes, m.astype(np.float32), 0.5, spacing=sp,
                                         allow_degenerate=True)
    tri = verts[faces].astype(np.float64)
    bs_mesh = 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]),
                                   axis=1).sum()
    del verts, faces, tri
    print(f"  BS from cube configurations {t_counts:.3f} s vs scikit-image's mesh {t_mesh:.2f} s "
          f"(x{t_mesh / t_counts:.0f}), relative difference {abs(bs_counts / bs_mesh - 1):.1e}")
    print(f"  Tb.Sp {t_sp:.2f} s | surface + SMI {t_smi:.2f} s | Euler + edge correction "
          f"{t_chi:.2f} s | MIL fabric {t_mil:.2f} s | total {t_th + t_sp + t_smi + t_chi + t_mil:.2f} s")
    g = sm.skeleton_graph(m, sp)
    _, t_v = clock(vessel_measures, g, m, sp)
    print(f"  vessel measures {t_v:.2f} s ({g.n_edges} branches, {len(g.points) / t_v / 1e6:.2f} M "
          f"points/s)")
    if size == 128:
        ven = sm.phantoms.make("venation", cells=(24, 24), n_spurs=40)
        gv = sm.skeleton_graph(ven.mask, ven.spacing)
        _, t_ven = clock(venation_measures, gv, ven.mask, ven.spacing)
        print(f"  venation measures on a {ven.mask.shape} leaf phantom: {t_ven:.3f} s "
              f"({ven.mask.size / t_ven / 1e6:.1f} M pixels/s)")


def _sparse_volume(tmp):
    """pyvista's frog blood label (32 M voxels, 0.1 % foreground) when
    pyvista's example data is at hand, else a random tree padded to 320^3."""
    try:
        from pyvista import examples
        v = examples.load_frog_tissues()
        labels = np.asarray(v.point_data[v.array_names[0]]).reshape(v.dimensions[::-1])
        mask, spacing, name = labels == 1, tuple(float(s) for s in v.spacing[::-1]), "frog blood"
    except Exception:  # no network or no pyvista: an invented stand-in
        ph = sm.phantoms.make("tree", seed=3)
        pad = [(max(0, (320 - n) // 2),) * 2 for n in ph.mask.shape]
        mask, spacing, name = np.pad(ph.mask, pad), ph.spacing, "padded random tree"
    path = Path(tmp) / "sparse.tif"
    write_tiff(path, mask.astype(np.uint8), spacing, "mm")
    return path, mask, name


def bench_scans(tmp):
    """Real-scan path: measure sets in an ROI on a sparse volume, the vessel
    enhancement filter and the automatic field of view."""
    from skimage import data
    from skimage.filters import gaussian, threshold_otsu
    from skelmorph.roi import field_of_view
    from skelmorph.segment import enhance_vessels
    path, mask, name = _sparse_volume(tmp)
    print(f"\nsparse volume ({name}, {mask.shape}, {mask.mean():.2%} foreground), whole CLI-like "
          "analyze in a fresh process:")
    runs = {}
    for label, extra in (("vessel", "measures='vessel'"), ("all", "measures='all'")):
        for roi in ("None", "'auto'"):
            code = ("import time, skelmorph as sm; t=time.perf_counter(); "
                    f"sm.analyze({str(path)!r}, roi={roi}, {extra}, tree=None, n_radii=0); "
                    "print(time.perf_counter()-t)")
            runs[label, roi] = _peak_rss_of(code)
    for roi in ("None", "'auto'"):
        (tv, mv), (ta, ma) = runs["vessel", roi], runs["all", roi]
        print(f"  roi={roi:<7} vessel set {tv:6.2f} s {mv:6.0f} MB | all sets {ta:6.2f} s "
              f"{ma:6.0f} MB | all / vessel x{ta / tv:.2f} time, x{ma / mv:.2f} memory")
    green = data.retina()[..., 1].astype(np.float32)
    _, t_ref = clock(gaussian, green, 4)
    _, t_sato = clock(enhance_vessels, green, (1.0, 1.0), (1.0, 4.0), dark=True)
    _, t_fov = clock(field_of_view, green)
    _, t_otsu = clock(threshold_otsu, green)
    mp = green.size / 1e6
    print(f"retina photo ({green.shape}, {mp:.1f} MP): vessel enhancement, 4 scales, "
          f"{t_sato / mp:.2f} s/MP (x{t_sato / t_ref:.0f} one Gaussian at the largest scale); "
          f"field of view {t_fov:.2f} s (x{t_fov / t_otsu:.0f} Otsu's threshold)")
    core = sm.phantoms.core_scan(n_cells=8, pitch=16.0)
    grey = core.mask.astype(np.float32)
    _, t_ref3 = clock(gaussian, grey, 4)
    _, t_sato3 = clock(enhance_vessels, grey, core.spacing, (1.0, 4.0))
    mv = grey.size / 1e6
    print(f"grey core scan {grey.shape} ({mv:.1f} M voxels): vessel enhancement "
          f"{t_sato3 / mv:.2f} s per M voxels (x{t_sato3 / t_ref3:.0f} one Gaussian)")


def bench_cohort(n_samples=24, size=128):
    import pandas as pd
    from scipy.spatial.distance import cdist
    from skelmorph.cohort.run import run_cohort
    print(f"\ncohort: {n_samples} foam samples of {size}^3 (default analysis options)")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        lines = ["sample,path,group"]
        for i in range(n_samples):
            ph = foam(size=float(size), cell=16.0, rod_radius=2.5, seed=i)
            write_tiff(tmp / f"s{i}.tif", ph.mask, ph.spacing)
            lines.append(f"s{i},s{i}.tif,{'ab'[i % 2]}")
        (tmp / "m.csv").write_text("\n".join(lines) + "\n")
        times = {}
        for w in (1, 2):
            rep, times[w] = clock(run_cohort, tmp / "m.csv", tmp / f"study{w}", workers=w,
                                  progress=False)
            assert len(rep.computed) == n_samples, rep.failed
        _, t_noop = clock(run_cohort, tmp / "m.csv", tmp / "study2", workers=2, progress=False)
        print(f"  1 worker {times[1]:.1f} s, 2 workers {times[2]:.1f} s: speed-up "
              f"x{times[1] / times[2]:.2f}; no-op re-run of {n_samples} cached samples "
              f"{t_noop:.2f} s")
    # Profile distance matrix for 1000 synthetic samples (64-point common grid).
    rng = np.random.default_rng(0)
    grid = np.linspace(0, 100, 64)
    curves = rng.gamma(3, 1, (1000, 1)) * np.exp(-((grid - rng.uniform(20, 60, (1000, 1))) / 20) ** 2)
    _, t_d = clock(cdist, curves, curves, "cityblock")
    from skelmorph import profile_distance
    a = pd.DataFrame({"radius": grid, "crossings": curves[0]})
    b = pd.DataFrame({"radius": grid, "crossings": curves[1]})
    _, t_one = clock(lambda: [profile_distance(a, b, "crossings") for _ in range(200)])
    print(f"  profile distances, 1000 samples: matrix {t_d:.2f} s on a common grid vs "
          f"~{t_one / 200 * 1000 * 999 / 2:.0f} s pair by pair (x{t_one / 200 * 499500 / t_d:.0f})")


def _folder_size(paths):
    return sum(p.stat().st_size for p in paths if p.is_file())


def bench_report(n_large=1000):
    import shutil
    from skelmorph.cohort.compare import compare_cohort
    from skelmorph.demo import run_demo
    from skelmorph.report.html import write_report
    print("\nreport pages:")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        run_demo(tmp / "demo", progress=False)
        study = tmp / "demo" / "study"
        shutil.rmtree(study / "figures" / "gallery")
        _, t = clock(write_report, study)
        size = _folder_size([study / "report.html", *(study / "figures").rglob("*.png")])
        print(f"  demo study (16 samples): page with figures written in {t:.2f} s, "
              f"{size / 1e6:.2f} MB")
        # A synthetic 1000-sample study: measures only, 24 sample folders for the gallery.
        big = tmp / "big"
        (big / "samples").mkdir(parents=True)
        rng = np.random.default_rng(0)
        groups = np.array(["a", "b", "c"])[rng.integers(0, 3, n_large)]
        shift = (groups == "b") * 0.5
        cols = {"sample": [f"s{i:04d}" for i in range(n_large)], "group": groups,
                "path": ["x.tif"] * n_large, "spacing": ["1 1 1"] * n_large,
                "unit": ["um"] * n_large}
        for k in range(12):
            cols[f"measure_{k}"] = rng.normal(shift * (k < 3), 1, n_large)
        cols["total_length"] = rng.gamma(5, 100, n_large)
        cols["cycle_rank"] = rng.poisson(300, n_large)
        import pandas as pd
        pd.DataFrame(cols).to_csv(big / "cohort.csv", index=False)
        one = next((tmp / "demo" / "study" / "samples").iterdir())
        for s in cols["sample"][:24]:
            (big / "samples" / s).mkdir()
            shutil.copy(one / "graph.npz", big / "samples" / s / "graph.npz")
        _, t_cmp = clock(compare_cohort, big, n_repeats=2, n_permutations=10)
        _, t = clock(write_report, big)
        size = _folder_size([big / "report.html", *(big / "figures").rglob("*.png")])
        print(f"  synthetic {n_large}-sample study: compare {t_cmp:.1f} s; page with figures "
              f"{t:.2f} s, {size / 1e6:.2f} MB (targets: 30 s, 20 MB)")


def bench_edt(sizes):
    """Exact Euclidean distance transforms with anisotropic voxels: ours
    (float32, numba, parallel over lines) against scipy's and, when installed,
    the ``edt`` package from PyPI, with the largest difference to scipy."""
    from skelmorph.thinning import distance_map_sq
    print("\ndistance transform, voxel (1.5, 1, 1):")
    try:
        import edt
    except ImportError:
        edt = None
    for size in sizes:
        m = foam(size=float(size), cell=16.0, rod_radius=2.5, seed=0).mask
        sp = (1.5, 1.0, 1.0)
        distance_map_sq(m[:8], sp)  # compiled before the clock
        ours, t_ours = clock(lambda: np.sqrt(distance_map_sq(m, sp)))
        ref, t_ref = clock(ndi.distance_transform_edt, m, sampling=sp)
        line = (f"  {size}^3: ours {t_ours:.2f} s, scipy {t_ref:.2f} s (x{t_ref / t_ours:.1f}), "
                f"max |ours - scipy| {float(np.abs(ours - ref).max()):.1e}")
        if edt is not None:
            other, t_edt = clock(edt.edt, m, anisotropy=sp, black_border=False, parallel=2)
            line += (f"; edt package {t_edt:.2f} s (ours x{t_edt / t_ours:.2f}), "
                     f"max |edt - scipy| {float(np.abs(other - ref).max()):.1e}")
        print(line)


def bench_memory(sizes):
    """Peak memory per voxel of ``analyze`` with the bone set, in a child
    process per size (the mask is made before the clock, and its own bytes
    are included)."""
    print("\npeak memory of analyze --measures bone (child process, VmHWM):")
    for size in sizes:
        code = (
            "import time, numpy as np, skelmorph as sm; from skelmorph.phantoms import foam; "
            f"ph = foam(size={float(size)}, cell=16.0, rod_radius=2.5, seed=0); "
            "t = time.perf_counter(); "
            "sm.analyze(ph.mask, ph.spacing, measures='bone', n_radii=0, tree=None, "
            "figures=False); print(time.perf_counter() - t)")
        seconds, mb = _peak_rss_of(code)
        base, base_mb = _peak_rss_of(
            "import time, numpy as np, skelmorph as sm; from skelmorph.phantoms import foam; "
            f"ph = foam(size={float(size)}, cell=16.0, rod_radius=2.5, seed=0); "
            "t = time.perf_counter(); from skelmorph.thinning import thin; "
            "thin(ph.mask, ph.spacing); print(time.perf_counter() - t)")
        n = size ** 3
        print(f"  {size}^3: {mb:7.0f} MB peak = {mb * 2**20 / n:5.1f} bytes/voxel, "
              f"{seconds:6.1f} s; our thinning alone {base_mb:7.0f} MB "
              f"({base_mb * 2**20 / n:4.1f} bytes/voxel), {base:5.1f} s "
              f"(analyze / thinning x{seconds / base:.1f})")


def bench_chunks(sizes, limit, bone_max=None):
    """The default analysis of foams (tiles of a 256^3 foam, saved as .npy)
    in slabs under a memory limit, against the same analysis in memory and
    against our thinning of the whole volume (child processes: wall time,
    CPU time, peak memory); up to 512^3 also the same foam as a noisy grey
    scan smoothed and cleaned in slabs.  The bone set runs up to ``bone_max``
    (all sizes when None)."""
    print(f"\nanalysis in slabs (memory limit {limit}) vs in memory vs our thinning "
          "(child processes, peak of the process and its workers):")
    tile = foam(size=256.0, cell=16.0, rod_radius=2.5, seed=0).mask
    walls = {"slabs": [], "memory": [], "bone": []}
    with tempfile.TemporaryDirectory(dir=".") as tmp:
        for size in sizes:
            reps = max(1, size // 256)
            vol = np.tile(tile, (reps, reps, reps))[:size, :size, :size]
            path = Path(tmp) / f"foam{size}.npy"
            np.save(path, vol.astype(np.uint8))
            del vol
            n = size ** 3
            clock_code = ("import time, numpy as np, skelmorph as sm; "
                          "w = time.perf_counter(); c = time.process_time(); ")
            stop = "; print(time.perf_counter() - w, time.process_time() - c)"
            rows = {}
            runs = {"thinning": clock_code + "from skelmorph.thinning import thin; "
                    f"m = np.load({str(path)!r}) > 0; thin(m)" + stop,
                    "slabs": clock_code + f"r = sm.analyze({str(path)!r}, spacing=1, "
                    f"memory_limit={limit!r}, tree=None, n_radii=0, figures=False, "
                    f"out={str(Path(tmp) / 'out')!r}); print(r.summary['n_chunks'], "
                    "r.summary['n_branches'])" + stop}
            # The bone set in slabs (the 1024^3 case takes about half an hour).
            if bone_max is None or size <= bone_max:
                runs["bone"] = clock_code + (
                    f"r = sm.analyze({str(path)!r}, spacing=1, memory_limit={limit!r}, "
                    f"measures='bone', tree=None, n_radii=0, figures=False, "
                    f"out={str(Path(tmp) / 'out')!r}); print(r.summary['n_chunks'], "
                    "r.summary['n_branches'])" + stop)
            if size <= 512:
                # The same foam as a noisy grey scan: smoothing, Otsu and the
                # default clean-ups read through in every slab.
                rng = np.random.default_rng(0)
                grey = np.load(path) * np.uint8(100) + np.uint8(60)
                grey += rng.integers(0, 40, grey.shape, dtype=np.uint8)
                grey_path = Path(tmp) / f"grey{size}.npy"
                np.save(grey_path, grey)
                del grey
                runs["grey"] = clock_code + (
                    f"r = sm.analyze({str(grey_path)!r}, spacing=1, smooth=1.0, "
                    f"memory_limit={limit!r}, tree=None, n_radii=0, figures=False, "
                    f"out={str(Path(tmp) / 'out')!r}); print(r.summary['n_chunks'], "
                    "r.summary['n_branches'])" + stop)
                runs["memory"] = clock_code + (
                    f"r = sm.analyze({str(path)!r}, spacing=1, memory_limit='20GB', tree=None, "
                    "n_radii=0, figures=False); print(r.summary['n_chunks'], "
                    "r.summary['n_branches'])" + stop)
            for name, code in runs.items():
                rows[name] = _run_child(code)
                if name in ("slabs", "grey", "bone"):
                    import shutil
                    shutil.rmtree(Path(tmp) / "out", ignore_errors=True)
            base = rows["thinning"]
            for name, (lines, mb) in rows.items():
                wall, cpu = map(float, lines[-1].split())
                extra = f", {lines[-2]} (slabs, branches)" if name != "thinning" else ""
                if name in walls:
                    walls[name].append((n, wall))
                print(f"  {size}^3 {name:>8}: {wall:7.1f} s wall, {cpu:7.1f} s CPU, "
                      f"{mb:7.0f} MB = {mb * 2**20 / n:5.1f} bytes/voxel "
                      f"(x{wall / float(base[0][-1].split()[0]):.1f} thinning){extra}")
            path.unlink()
    for name, pts in walls.items():
        if len(pts) >= 2:
            x, y = np.log([p[0] for p in pts]), np.log([p[1] for p in pts])
            print(f"  time grows as N^{np.polyfit(x, y, 1)[0]:.2f} ({name})")


#: Prepended to a child's code: a thread that samples the memory of the
#: child and its worker processes together (VmHWM counts one process).  Each
#: process counts its proportional set size (Pss): workers are forked, and
#: the pages they share with the main process would count twice in RSS.
_TREE_SAMPLER = (
    "import os as _os, threading as _th, time as _tm\n"
    "_peak = [0]\n"
    "def _rss(pid):\n"
    "    try:\n"
    "        for _l in open(f'/proc/{pid}/smaps_rollup'):\n"
    "            if _l.startswith('Pss:'):\n"
    "                return int(_l.split()[1]) * 1024\n"
    "    except OSError:\n"
    "        pass\n"
    "    return 0\n"
    "def _kids(pid):\n"
    "    out = []\n"
    "    for t in _os.listdir(f'/proc/{pid}/task'):\n"
    "        try:\n"
    "            out += [int(k) for k in open(f'/proc/{pid}/task/{t}/children').read().split()]\n"
    "        except OSError:\n"
    "            pass\n"
    "    return out\n"
    "def _watch():\n"
    "    me = _os.getpid()\n"
    "    while True:\n"
    "        _peak[0] = max(_peak[0], _rss(me) + sum(_rss(k) for k in _kids(me)))\n"
    "        _tm.sleep(0.2)\n"
    "_th.Thread(target=_watch, daemon=True).start()\n")


def _run_child(code):
    """Run ``code`` in a fresh interpreter: (its output lines, its peak memory in
    MB: the larger of its VmHWM and the sampled sum over it and its workers)."""
    import subprocess
    code = _TREE_SAMPLER + code + (
        "; print(max(int([l.split()[1] for l in open('/proc/self/status') "
        "if l.startswith('VmHWM')][0]), _peak[0] // 1024))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    lines = out.stdout.strip().splitlines()
    return lines[:-1], float(lines[-1]) / 1024


def bench_compare():
    import warnings
    from scipy.stats import spearmanr
    from sklearn.impute import SimpleImputer
    from sklearn.model_selection import StratifiedKFold, permutation_test_score
    from sklearn.neighbors import KNeighborsClassifier, NeighborhoodComponentsAnalysis
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from skelmorph.cohort.compare import compare_cohort
    from skelmorph.cohort.distances import silhouette as _silhouette
    from skelmorph.cohort.models import classify, feature_matrix
    from skelmorph.cohort.study import load_study
    from skelmorph.demo import run_demo
    from skelmorph.descriptors.barcode import diagrams_from_table
    from skelmorph.descriptors.distances import (sliced_wasserstein_matrix,
                                                 wasserstein_distance)
    print("\ncohort compare (demo study, 16 samples):")
    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        run_demo(tmp / "demo", progress=False)
        study = tmp / "demo" / "study"
        runs = {}
        for method in ("exact", "sliced"):
            c0, t0 = time.process_time(), time.perf_counter()
            res = compare_cohort(study, out=tmp / method, n_repeats=5, n_permutations=100,
                                 barcode_distance=method)
            runs[method] = (time.perf_counter() - t0, time.process_time() - c0, res)
        for method, (wall, cpu, res) in runs.items():
            print(f"  barcodes {method:>6}: {wall:5.1f} s wall, {cpu:5.1f} s CPU; "
                  f"{len(res['significant_measures'])} significant measures, accuracy "
                  f"{res['cv_accuracy']:.2f}, p {res['permutation_p']:.3g}, "
                  f"weights {res['weights']}")
        same = runs["exact"][2]["significant_measures"] == runs["sliced"][2]["significant_measures"]
        print(f"  same significant measures: {same}")
        st = load_study(study)
        X, _ = feature_matrix(st)
        y = st["cohort"]["group"].to_numpy(str)
        pipe = make_pipeline(SimpleImputer(strategy="median"), StandardScaler(),
                             NeighborhoodComponentsAnalysis(random_state=0, max_iter=50),
                             KNeighborsClassifier(n_neighbors=3))
        _, t_ref = clock(permutation_test_score, pipe, X, y, n_permutations=100,
                         cv=StratifiedKFold(5, shuffle=True, random_state=0), random_state=0)
        _, t_ours = clock(classify, X, y, n_repeats=1, n_permutations=100)
        print(f"  permutation test, 100 permutations: scikit-learn pipeline {t_ref:.2f} s, "
              f"ours {t_ours:.2f} s (x{t_ref / t_ours:.1f})")
        diagrams = diagrams_from_table(st["barcodes"], st["cohort"]["sample"].tolist())
        n = len(diagrams)
        t0 = time.perf_counter()
        exact = np.zeros((n, n))
        for i in range(n):
            for j in range(i + 1, n):
                exact[i, j] = exact[j, i] = wasserstein_distance(diagrams[i], diagrams[j], 1)
        t_exact = time.perf_counter() - t0
        fine = sliced_wasserstein_matrix(diagrams, 2000)
        iu = np.triu_indices(n, 1)
        bars = np.mean([len(d) for d in diagrams])
        for m in (10, 50, 200):
            sw, t_sw = clock(sliced_wasserstein_matrix, diagrams, m)
            ratio = sw[iu] / exact[iu]
            quad = np.max(np.abs(sw[iu] / fine[iu] - 1))
            print(f"  sliced, {m:>3} directions: {t_sw:5.2f} s vs exact {t_exact:5.2f} s "
                  f"(x{t_exact / t_sw:.0f}, {bars:.0f} bars per barcode); SW / W1 "
                  f"{ratio.min():.3f}-{ratio.max():.3f}; Spearman rho "
                  f"{spearmanr(sw[iu], exact[iu])[0]:.3f}; quadrature error vs 2000 "
                  f"directions {quad:.2%}; silhouette {_silhouette(sw, y):.3f} "
                  f"(exact {_silhouette(exact, y):.3f})")


def lattice_graph(shape):
    """Cubic lattice graph with unit spacing, as a SkeletonGraph."""
    from skelmorph import SkeletonGraph
    idx = np.arange(np.prod(shape)).reshape(shape)
    coords = np.argwhere(np.ones(shape, bool)).astype(float)
    edges = [np.column_stack([np.take(idx, np.arange(shape[a] - 1), a).ravel(),
                              np.take(idx, np.arange(1, shape[a]), a).ravel()])
             for a in range(len(shape))]
    return SkeletonGraph.from_edges(coords, np.concatenate(edges))


def _grid_leaf(n, cell=16, seed=0):
    """An invented leaf: an n x n grid of areoles whose veins have random odd
    widths of 3 to 9 pixels (outer veins 11)."""
    rng = np.random.default_rng(seed)
    size = n * cell + 24
    img = np.zeros((size, size), bool)
    for i in range(n + 1):
        c = 12 + i * cell
        for axis in (0, 1):
            w = 11 if i in (0, n) else int(rng.choice([3, 5, 7, 9]))
            k = w // 2
            sl = (slice(c - k, c + k + 1), slice(6, size - 6))
            img[sl if axis == 0 else sl[::-1]] = True
    return img


def bench_loops(sides=(32, 100)):
    """Hierarchical loop decomposition per 10^4 areoles, against labelling
    the areoles alone (scipy) and against building the graph it needs."""
    from skelmorph.measure.loops import loop_hierarchy
    print("\nloop hierarchy (Katifori & Magnasco 2012) on grid leaves:")
    for n in sides:
        img = _grid_leaf(n)
        graph, t_graph = clock(sm.skeleton_graph, img)
        (summary, table), t_loops = clock(loop_hierarchy, graph, img, (1.0, 1.0))
        _, t_label = clock(ndi.label, ~img)
        areoles = int(np.count_nonzero(table["areoles"] == 1))
        print(f"  {n}x{n} grid ({img.shape[0]}^2 px): {areoles} areoles, "
              f"{summary['loop_merges']} merges, {summary['loop_nesting_levels']} levels; "
              f"{t_loops:.2f} s = {t_loops / areoles * 1e4:.2f} s per 10^4 areoles; "
              f"x{t_loops / t_label:.0f} labelling the areoles ({t_label:.3f} s), "
              f"x{t_loops / t_graph:.2f} building the graph ({t_graph:.2f} s)")


def _plates_in_foam(size):
    """The foam with plates every 32 voxels across axis 0 (a plate-rich solid)."""
    m = foam(size=float(size), cell=16.0, rod_radius=2.5, seed=0).mask
    z = np.arange(m.shape[0])
    m[(z % 32) < 5] = True
    return m


def bench_platerod(sizes):
    """Surface thinning against our curve thinning; the plate and rod
    decomposition against the curve thinning too; direct Tb.N against Tb.Sp
    (both local thickness), on the rod foam and the foam with plates."""
    from skelmorph.measure.bone import _local_thickness_in, direct_trabecular_number
    from skelmorph.measure.platerod import plate_rod_measures
    from skelmorph.thinning import distance_map_sq, thin
    print("\nplates and rods, direct Tb.N:")
    for size in sizes:
        for name, m in (("rod foam", foam(size=float(size), cell=16.0, rod_radius=2.5,
                                          seed=0).mask),
                        ("foam + plates", _plates_in_foam(size))):
            sp = (1.0, 1.0, 1.0)
            dsq = distance_map_sq(m, sp)
            curves, t_c = clock(thin, m, sp, dsq=dsq)
            skel, t_s = clock(thin, m, sp, dsq=dsq, keep="surfaces")
            r, t_pr = clock(plate_rod_measures, m, sp, dsq=dsq, skeleton=skel)
            tbn, t_tbn = clock(direct_trabecular_number, skel, sp)
            space = ~m
            _, t_sp = clock(_local_thickness_in, space, space, sp)
            print(f"  {name} {size}^3: surface thinning {t_s:.2f} s = x{t_s / t_c:.2f} curve "
                  f"thinning ({t_c:.2f} s; {int(skel.sum())} vs {int(curves.sum())} voxels) | "
                  f"plates and rods {t_pr:.2f} s = x{t_pr / t_c:.2f} curve thinning "
                  f"(pBV/TV {r['pBV/TV']:.3f}, rBV/TV {r['rBV/TV']:.3f}, {r['n_plates']} "
                  f"plates, {r['n_rods']} rods) | direct Tb.N {t_tbn:.2f} s = x{t_tbn / t_sp:.2f} "
                  f"Tb.Sp ({t_sp:.2f} s)")


def bench_flow(graph):
    """Poiseuille flow: the sparse solve on the foam graph and on lattices of
    about 10^5 branches, against one sparse Laplacian product and a dense
    solve of the same system where that fits."""
    from scipy import sparse
    from skelmorph.measure.flow import network_flow
    print("\nnetwork flow (Kirchhoff, sparse LU):")
    for name, g in (("foam graph", graph), ("lattice 32^3", lattice_graph((32, 32, 32))),
                    ("lattice 12^3", lattice_graph((12, 12, 12)))):
        tips = np.flatnonzero(g.node_degree == 1)
        outlets = tips[1:] if len(tips) > 1 else np.array([g.n_nodes - 1])
        inlet = [int(tips[0])] if len(tips) > 1 else [0]
        r = np.full(g.n_edges, 1.0)
        out, t = clock(network_flow, g, inlet, outlets, radius=r)
        w = sparse.random(g.n_nodes, g.n_nodes, density=4 / max(g.n_nodes, 1), format="csr")
        _, t_mv = clock(lambda: [w @ np.ones(g.n_nodes) for _ in range(100)])
        line = (f"  {name}: {g.n_edges} branches, {g.n_nodes} nodes: {t:.3f} s "
                f"({t / max(g.n_edges, 1) * 1e5:.2f} s per 10^5 branches; "
                f"x{t / (t_mv / 100):.0f} one sparse product")
        if g.n_nodes <= 3000:
            lap = sparse.csgraph.laplacian(sparse.coo_matrix(
                (np.ones(g.n_edges), (g.edges[:, 0], g.edges[:, 1])),
                shape=(g.n_nodes, g.n_nodes)) + 0).toarray()
            _, t_dense = clock(np.linalg.solve, lap[1:-1, 1:-1] + np.eye(g.n_nodes - 2) * 1e-9,
                               np.ones(g.n_nodes - 2))
            line += f"; a dense solve of the same size {t_dense:.3f} s"
        print(line + ")")


def order_complex_betti(graph, k, m):
    """Reference: build the order complex of P_{m..k} chain by chain (gudhi)."""
    import itertools
    import gudhi
    import networkx as nx
    g = graph.to_networkx()
    paths = [((v,), ()) for v in g.nodes] if m == 0 else []
    for a, b in itertools.combinations(list(g.nodes), 2):
        for p in nx.all_simple_edge_paths(g, a, b, cutoff=k):
            if len(p) >= max(m, 1):
                paths.append(((p[0][0],) + tuple(e[1] for e in p), tuple(e[2] for e in p)))
    canon = {min((v, e), (v[::-1], e[::-1])) for v, e in paths}
    index = {p: i for i, p in enumerate(canon)}
    st = gudhi.SimplexTree()

    def extend(chain, verts, keys):
        j = len(keys)
        subs = [min((verts[a:b + 1], keys[a:b]), (verts[a:b + 1][::-1], keys[a:b][::-1]))
                for a in range(j + 1) for b in range(a + m, j + 1) if (a, b) != (0, j)]
        if not subs:
            st.insert(chain)
        for sv, sk in subs:
            extend([index[(sv, sk)]] + chain, sv, sk)

    for (v, e), i in index.items():
        extend([i], v, e)
    st.compute_persistence(homology_coeff_field=2, persistence_dim_max=True)
    return st.betti_numbers()


def bench_paths(graph):
    from skelmorph import path_counts, path_poset_invariants
    path_counts(lattice_graph((3, 3)), 5)  # JIT warm-up
    print("\npath counts (closed forms to 3 edges, compiled enumeration beyond):")
    lattice = lattice_graph((46, 46, 47))
    for name, g in (("foam graph", graph), (f"lattice ({lattice.n_nodes} nodes)", lattice)):
        line = f"  {name}:"
        for k in range(3, 12):
            counts, t = clock(path_counts, g, k)
            line += f" k={k} {t:.2f} s (n_k={counts[-1]:.3g});"
            if t > 8:
                break
        print(line)
    small = lattice_graph((3, 3, 2))
    for k in (2, 3):
        ours, t_ours = clock(path_poset_invariants, small, k)
        ref, t_ref = clock(order_complex_betti, small, k, 0)
        print(f"  invariants of a 3x3x2 lattice, k={k}: {t_ours * 1e3:.2f} ms vs explicit order "
              f"complex {t_ref:.2f} s (x{t_ref / t_ours:.0f}); Betti {list(ours['betti'])} vs "
              f"{ref[:2]}; f-vector size {sum(ours['f_vector'])}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--large", action="store_true", help="also run 512^3")
    ap.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    ap.add_argument("--chunk-sizes", type=int, nargs="+", default=[256, 512],
                    help="volume sides of the 'chunks' case (multiples of 256; add 1024)")
    ap.add_argument("--memory-limit", default="2GB", help="memory limit of the 'chunks' case")
    ap.add_argument("--chunk-bone-max", type=int, default=None,
                    help="largest side at which the 'chunks' case runs the bone set")
    ap.add_argument("--only", nargs="+",
                    default=["thinning", "pipeline", "measures", "scans", "trees", "profiles",
                             "paths", "flow", "loops", "cohort", "compare", "report", "memory",
                             "edt", "chunks", "platerod"],
                    choices=["thinning", "pipeline", "measures", "scans", "trees", "profiles",
                             "paths", "flow", "loops", "cohort", "compare", "report", "memory",
                             "edt", "chunks", "platerod"])
    args = ap.parse_args(argv)
    sizes = args.sizes + ([512] if args.large else [])
    print(f"skelmorph {sm.__version__}, numpy {np.__version__}, python {sys.version.split()[0]}")
    # Steady state: pay one-off imports (networkx, scikit-image parts) before timing.
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:  # every kernel compiled/loaded once
        sm.analyze(foam(size=24.0, cell=8.0, rod_radius=1.5).mask, out=Path(tmp) / "warm")
    print(f"warm-up (imports, first calls): {time.perf_counter() - t0:.2f} s")
    graph = None
    if "thinning" in args.only:
        with tempfile.TemporaryDirectory() as tmp:
            for s in sizes:
                bench_thinning(s, tmp)
    if "pipeline" in args.only:
        with tempfile.TemporaryDirectory() as tmp:
            rows = [bench_pipeline(s, tmp) for s in sizes]
        graph = rows[-1]["graph"]
        if len(rows) > 1:
            a, b = rows[0], rows[-1]
            print(f"\nscaling {a['size']}^3 -> {b['size']}^3: centreline voxels "
                  f"x{b['voxels'] / a['voxels']:.1f}")
    if "measures" in args.only:
        for size in sizes:
            bench_measures(size)
    if "scans" in args.only:
        with tempfile.TemporaryDirectory() as tmp:
            bench_scans(tmp)
    if graph is None and {"trees", "profiles", "paths", "flow"} & set(args.only):
        ph = foam(size=float(sizes[-1]), cell=16.0, rod_radius=2.5, seed=0)
        graph = sm.skeleton_graph(ph.mask, ph.spacing)
    if "trees" in args.only:
        bench_trees(graph)
    if "profiles" in args.only:
        bench_profiles(graph)
    if "paths" in args.only:
        bench_paths(graph)
    if "flow" in args.only:
        bench_flow(graph)
    if "loops" in args.only:
        bench_loops()
    if "platerod" in args.only:
        bench_platerod(sizes)
    if "cohort" in args.only:
        bench_cohort()
    if "edt" in args.only:
        bench_edt(sizes)
    if "chunks" in args.only:
        bench_chunks(args.chunk_sizes, args.memory_limit, args.chunk_bone_max)
    if "memory" in args.only:
        bench_memory(sizes)
    if "compare" in args.only:
        bench_compare()
    if "report" in args.only:
        bench_report()


if __name__ == "__main__":
    main()
