"""Benchmarks: time every stage of the pipeline on foam phantoms.

Prints seconds per stage and ratios against references measured in the same
run: the thinning itself (scikit-image), scipy's full distance transform and
a KD-tree radius search.  Usage:

    python scripts/bench.py [--large] [--sizes 128 256]
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
    ours = t["restore"] + t["graph"] + t["radii"] + t["topology"] + t_measure
    print(f"\nfoam {size}^3: {n_vox} centreline voxels, {graph.n_edges} branches, "
          f"{graph.cycle_rank} loops")
    print(f"  read {t_read:6.3f} s | skeletonize {t['skeletonize']:6.3f} s | restore {t['restore']:6.3f} s"
          f" | graph {t['graph']:6.3f} s | radii {t['radii']:6.3f} s | loop check {t['topology']:6.3f} s"
          f" | measures {t_measure:6.3f} s")
    print(f"  (restore + graph + radii + loop check + measures) / skeletonize = {ours / t['skeletonize']:5.2f}")
    print(f"  graph time per million centreline voxels = {t['graph'] / n_vox * 1e6:6.2f} s")
    print(f"  radii: shells {t['radii']:.3f} s vs KD-tree {t_kd:.3f} s "
          f"(x{t_kd / t['radii']:.1f}) vs full distance transform {t_edt:.3f} s "
          f"(x{t_edt / t['radii']:.1f})")
    print(f"  loop check: sparse Euler characteristic {t['topology']:.3f} s vs scikit-image "
          f"euler_number {t_euler_ref:.3f} s (x{t_euler_ref / t['topology']:.1f})")
    return {"size": size, "voxels": n_vox, "ratio": ours / t["skeletonize"]}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--large", action="store_true", help="also run 512^3")
    ap.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    args = ap.parse_args(argv)
    sizes = args.sizes + ([512] if args.large else [])
    print(f"skelmorph {sm.__version__}, numpy {np.__version__}, python {sys.version.split()[0]}")
    # Steady state: pay one-off imports (networkx, scikit-image parts) before timing.
    t0 = time.perf_counter()
    sm.skeleton_graph(foam(size=24.0, cell=8.0, rod_radius=1.5).mask)
    print(f"warm-up (imports, first calls): {time.perf_counter() - t0:.2f} s")
    with tempfile.TemporaryDirectory() as tmp:
        rows = [bench_pipeline(s, tmp) for s in sizes]
    if len(rows) > 1:
        a, b = rows[0], rows[-1]
        print(f"\nscaling {a['size']}^3 -> {b['size']}^3: centreline voxels x{b['voxels'] / a['voxels']:.1f}")


if __name__ == "__main__":
    main()
