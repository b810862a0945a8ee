"""Analysis in slabs (skelmorph.chunked) against the whole volume in memory,
and the readers of large scans (skelmorph.volume).

The reference is skelmorph's own in-memory analysis of the same volume:
the slabs must give the same centreline voxel for voxel and the same graph.
The shapes are chosen so that slab faces cut through junction clusters and
loops (foams, a torus lying across the faces) with anisotropic voxels and
with structures thick enough to make the halo grow.
"""

import json
import re
import subprocess
import sys

import numpy as np
import pytest
import tifffile

import skelmorph as sm
from skelmorph import chunked
from skelmorph.chunked import (chunked_cavities, chunked_graph, chunked_skeleton, parse_memory,
                               plan_slabs, survey)
from skelmorph.errors import ImageReadError, InputError
from skelmorph.io import write_tiff
from skelmorph.phantoms import foam, torus
from skelmorph.segment import count_cavities
from skelmorph.thinning import thin
from skelmorph.volume import ArrayVolume, open_volume, write_ome_zarr


def _planes_limit(shape, planes):
    """A memory limit that lets a slab hold ``planes`` planes."""
    return int(shape[1] * shape[2] * chunked.BYTES_PER_VOXEL * planes)


CASES = {
    # radius 6: junction blobs 18 voxels wide; the halo must grow from 32 to 48
    "thick foam": (lambda: foam(size=160.0, cell=24.0, rod_radius=6.0, seed=1), 130),
    "anisotropic foam": (lambda: foam(size=160.0, cell=16.0, rod_radius=2.5, seed=3,
                                      spacing=(1.6, 1.0, 1.0)), 90),
    "thin foam": (lambda: foam(size=128.0, cell=12.0, rod_radius=1.5, seed=5), 80),
}


@pytest.fixture(scope="module", params=sorted(CASES))
def case(request):
    make, planes = CASES[request.param]
    ph = make()
    vol = ArrayVolume(ph.mask.astype(np.uint8), tuple(ph.spacing), "um")
    return ph, vol, _planes_limit(ph.mask.shape, planes)


def test_slabs_thin_voxel_for_voxel_like_the_whole(case, tmp_path):
    ph, vol, limit = case
    sp = tuple(np.asarray(ph.spacing) / min(ph.spacing))
    cs = chunked_skeleton(vol, survey(vol), sp, memory_limit=limit, workdir=tmp_path)
    assert len(cs.slabs) >= 3  # faces cut through the structure
    assert cs.seam_warnings == []
    np.testing.assert_array_equal(cs.coords, np.argwhere(thin(ph.mask, sp)))
    assert cs.foreground == np.count_nonzero(ph.mask)


def test_slab_graph_equals_the_whole_graph(case, tmp_path):
    ph, vol, limit = case
    whole = sm.skeleton_graph(ph.mask, ph.spacing)
    graph, info = chunked_graph(vol, survey(vol), memory_limit=limit, workdir=tmp_path)
    assert info["n_chunks"] >= 3
    assert (graph.n_nodes, graph.n_edges, graph.cycle_rank, graph.n_components) == \
        (whole.n_nodes, whole.n_edges, whole.cycle_rank, whole.n_components)
    np.testing.assert_array_equal(graph.node_degree, whole.node_degree)
    np.testing.assert_allclose(graph.nodes, whole.nodes)
    np.testing.assert_allclose(graph.edge_length.sum(), whole.edge_length.sum(), rtol=1e-12)
    # equivalent radii: branch voxels counted slab by slab with the halo
    np.testing.assert_allclose(graph.edge_radius, whole.edge_radius, equal_nan=True)


def test_torus_cut_through_its_loop(tmp_path):
    ph = torus(major_radius=40.0, tube_radius=4.0)
    mask = np.ascontiguousarray(np.moveaxis(ph.mask, 0, 1))  # the ring stands across the slabs
    vol = ArrayVolume(mask, (1.0, 1.0, 1.0), "um")
    graph, info = chunked_graph(vol, survey(vol), memory_limit=_planes_limit(mask.shape, 80),
                                workdir=tmp_path)
    assert info["n_chunks"] >= 3
    assert graph.cycle_rank == 1 and graph.n_components == 1
    assert graph.edge_length.sum() == pytest.approx(2 * np.pi * 40.0, rel=0.02)  # analytic


def test_seam_check_repairs_a_too_shallow_halo(tmp_path, monkeypatch):
    """With the halo rule switched off, slab faces disagree; the seam check
    must find that and redo the slabs with deeper halos."""
    ph = foam(size=160.0, cell=24.0, rod_radius=6.0, seed=1)
    vol = ArrayVolume(ph.mask, (1.0, 1.0, 1.0), "um")
    monkeypatch.setattr(chunked, "HALO_RADII", 0)
    monkeypatch.setattr(chunked, "DEFAULT_HALO", 16)
    seen = []
    real = chunked._seam_mismatches
    monkeypatch.setattr(chunked, "_seam_mismatches", lambda r, s: seen.append(real(r, s))
                        or seen[-1])
    cs = chunked_skeleton(vol, survey(vol), (1.0, 1.0, 1.0),
                          memory_limit=_planes_limit(ph.mask.shape, 150), workdir=tmp_path)
    assert seen[0], "a 16-plane halo should not suffice for radius-6 rods"
    assert seen[-1] == [] and cs.seam_warnings == []
    np.testing.assert_array_equal(cs.coords, np.argwhere(thin(ph.mask)))


def test_cavities_counted_across_slabs():
    ph = foam(size=128.0, cell=16.0, rod_radius=2.5, seed=0)
    vol = ArrayVolume(ph.mask, (1.0, 1.0, 1.0), "um")
    slabs = plan_slabs(ph.mask.shape, _planes_limit(ph.mask.shape, 80), 32)
    assert len(slabs) >= 4
    assert chunked_cavities(vol, survey(vol), slabs) == count_cavities(ph.mask)
    assert chunked_cavities(vol, survey(vol), slabs, workers=2) == count_cavities(ph.mask)


def test_analyze_file_in_slabs_equals_in_memory(tmp_path):
    ph = foam(size=128.0, cell=16.0, rod_radius=2.5, seed=2, spacing=(1.25, 1.0, 1.0))
    path = tmp_path / "scan.tif"
    write_tiff(path, ph.mask.astype(np.uint8) * 255, ph.spacing)
    whole = sm.analyze(path, memory_limit="20GB", n_radii=20)
    limit = _planes_limit(ph.mask.shape, 90)
    slabs = sm.analyze(path, memory_limit=limit, n_radii=20, out=tmp_path / "out")
    assert whole.summary["n_chunks"] == 1 and whole.summary["halo"] == 0
    assert slabs.summary["n_chunks"] >= 2 and slabs.summary["halo"] > 0
    for key in ("n_nodes", "n_branches", "cycle_rank", "total_length", "volume_fraction",
                "mean_radius", "log_spanning_tree_count",
                "barcode_n_bars", "barcode_total_persistence", "profile_max_crossings",
                "max_strahler_order"):
        assert slabs.summary[key] == pytest.approx(whole.summary[key], rel=1e-12), key
    saved = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert saved["units"]["halo"] == "um" and saved["n_chunks"] == slabs.summary["n_chunks"]
    assert any(s["step"] == "analysed in slabs" for s in saved["preprocessing"])
    # A second run resumes from the slab files.
    files = sorted((tmp_path / "out" / ".slabs").glob("slab-*.npz"))
    stamps = [f.stat().st_mtime_ns for f in files]
    sm.analyze(path, memory_limit=limit, n_radii=20, out=tmp_path / "out")
    assert [f.stat().st_mtime_ns for f in files] == stamps


def test_local_workers_share_the_memory_limit(tmp_path):
    """Two local workers split the limit (twice the slabs) and give the same graph."""
    ph = foam(size=128.0, cell=16.0, rod_radius=2.5, seed=2)
    path = tmp_path / "scan.npy"
    np.save(path, np.concatenate([ph.mask, ph.mask[::-1]] * 2).astype(np.uint8))  # 512 planes
    limit = _planes_limit(ph.mask.shape, 384)  # one worker: cores of 320 planes, two: 128
    one = sm.analyze(path, memory_limit=limit, n_radii=0, tree=None, workers=1,
                     out=tmp_path / "one")
    two = sm.analyze(path, memory_limit=limit, n_radii=0, tree=None, workers=2,
                     out=tmp_path / "two")
    assert two.summary["n_chunks"] > one.summary["n_chunks"] >= 2
    for key in ("n_nodes", "n_branches", "cycle_rank", "total_length", "mean_radius"):
        assert two.summary[key] == pytest.approx(one.summary[key], rel=1e-12), key
    # branch volumes counted on both workers, added in slab order: the same radii
    np.testing.assert_array_equal(two.graph.edge_radius, one.graph.edge_radius)
    step = [s for s in two.summary["preprocessing"] if s["step"] == "analysed in slabs"][0]
    assert step["local_workers"] == 2


def test_fitting_workers_add_workers_only_where_they_pay():
    shape = (512, 100, 100)
    limit = _planes_limit(shape, 384)
    # one worker reads 512 + 2 x 2 x 32 planes; two read (512 + 4 x 2 x 32) / 2 each
    assert chunked.fitting_workers(shape, limit, 32, 2) == (2, limit / 2)
    # halos of 64: eight thin slabs per two workers read as much as two thick ones
    assert chunked.fitting_workers(shape, limit, 64, 2) == (1, limit)
    assert chunked.fitting_workers(shape, limit, 32, 2, scheduler="tcp://x:1") == (1, limit)
    # shares that leave thin cores: no gain, one worker with the whole limit
    assert chunked.fitting_workers(shape, _planes_limit(shape, 200), 32, 2)[0] == 1
    with pytest.raises(InputError, match="per slab"):
        chunked.fitting_workers(shape, limit, 192, 2)


def test_grey_scan_in_slabs_uses_a_streamed_otsu_threshold(tmp_path):
    """Otsu from the streamed histogram equals scikit-image's on the whole
    volume's float32 values (256 bins between the extremes), which is what
    the analysis in memory thresholds; an 8-bit scan's integer bins would
    put the threshold at 109 instead of 108.8 and change the mask."""
    from skimage.filters import threshold_otsu
    rng = np.random.default_rng(0)
    ph = foam(size=96.0, cell=16.0, rod_radius=2.5, seed=1)
    grey = np.where(ph.mask, 170, 60).astype(np.uint8) + rng.integers(0, 30, ph.mask.shape,
                                                                     dtype=np.uint8)
    vol = ArrayVolume(grey, (1.0, 1.0, 1.0), "um")
    seg = survey(vol, slab_planes=16)
    expect = threshold_otsu(grey.astype(np.float32))
    assert seg.mode == "threshold"
    assert seg.value == pytest.approx(expect, rel=1e-6)
    np.testing.assert_array_equal(seg(grey), grey > expect)
    for dtype, scale in ((np.uint16, 300), (np.float32, 1.5)):  # 16-bit counts, float bins
        other = grey.astype(dtype) * dtype(scale)
        got = survey(ArrayVolume(other, (1.0, 1.0, 1.0), "um"), slab_planes=16).value
        assert got == pytest.approx(threshold_otsu(other.astype(np.float32)), rel=1e-6)


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 1.0, 0.8)])
def test_smoothed_planes_equal_the_whole_filtered_volume(spacing):
    """A slab read through the Gaussian (its reach of extra planes filtered
    with it) equals scipy's gaussian_filter of the whole volume, bit for
    bit, at the volume's ends too."""
    from scipy import ndimage as ndi

    from skelmorph.volume import SmoothedVolume
    rng = np.random.default_rng(1)
    grey = rng.integers(0, 4000, (40, 21, 17)).astype(np.uint16)
    whole = ndi.gaussian_filter(grey.astype(np.float32), 1.5 / np.asarray(spacing))
    vol = SmoothedVolume(ArrayVolume(grey, spacing, "um"), 1.5)
    for a, b in [(0, 5), (5, 17), (17, 40), (39, 40)]:
        np.testing.assert_array_equal(vol.planes(a, b), whole[a:b])


def test_smoothed_grey_scan_in_slabs_equals_in_memory(tmp_path):
    """--smooth in slabs: the same mask (smoothing, then Otsu's threshold on
    the streamed histogram) and the same graph as the analysis in memory."""
    rng = np.random.default_rng(4)
    ph = foam(size=128.0, cell=16.0, rod_radius=2.5, seed=4, spacing=(1.25, 1.0, 1.0))
    grey = (np.where(ph.mask, 160.0, 70.0) + rng.normal(0, 25, ph.mask.shape))
    path = tmp_path / "grey.tif"
    write_tiff(path, np.clip(grey, 0, 255).astype(np.uint8), ph.spacing)
    whole = sm.analyze(path, memory_limit="20GB", smooth=1.0, n_radii=0, tree=None)
    slabs = sm.analyze(path, memory_limit=_planes_limit(ph.mask.shape, 90), smooth=1.0,
                       n_radii=0, tree=None)
    assert slabs.summary["n_chunks"] >= 2
    for key in ("n_nodes", "n_branches", "cycle_rank", "total_length", "volume_fraction"):
        assert slabs.summary[key] == pytest.approx(whole.summary[key], rel=1e-9), key
    steps = [s["step"] for s in slabs.summary["preprocessing"]]
    assert steps[0] == "gaussian smoothing"
    # A binary scan is refused with --smooth, in slabs as in memory.
    path = tmp_path / "binary.tif"
    write_tiff(path, ph.mask.astype(np.uint8), ph.spacing)
    for limit in ("20GB", _planes_limit(ph.mask.shape, 90)):
        with pytest.raises(InputError, match="already binary"):
            sm.analyze(path, memory_limit=limit, smooth=1.0, n_radii=0, tree=None)


@pytest.mark.parametrize("speck,hole", [(27, 27), (5, 0), (0, 9), (40, 3)])
def test_cleaned_planes_equal_the_whole_clean_up(speck, hole):
    """Speck removal then hole filling read slab by slab (each read reaching
    speck + hole planes further) equal the clean-ups of the whole mask
    (scipy.ndimage.label components), on noise full of specks and holes."""
    from skelmorph.chunked import CleanedVolume, Segmenter
    from skelmorph.segment import fill_holes, remove_specks
    rng = np.random.default_rng(speck + hole)
    grey = rng.random((70, 24, 20)).astype(np.float32)
    seg = Segmenter("threshold", 0.62)
    whole = fill_holes(remove_specks(seg(grey), speck), hole)
    assert not np.array_equal(whole, seg(grey))
    vol = CleanedVolume(ArrayVolume(grey, (1.0, 1.0, 1.0), "um"), seg, speck, hole)
    for a, b in [(0, 1), (0, 20), (20, 45), (33, 34), (45, 70), (0, 70)]:
        np.testing.assert_array_equal(vol.planes(a, b).astype(bool), whole[a:b])


def test_explicit_clean_ups_in_slabs(tmp_path):
    """--min-object-size and --max-hole-size in slabs give the in-memory
    mask; filling every hole is refused in one line (it has no reach)."""
    rng = np.random.default_rng(8)
    ph = foam(size=128.0, cell=16.0, rod_radius=2.5, seed=8)
    noisy = ph.mask ^ (rng.random(ph.mask.shape) < 0.002)
    path = tmp_path / "noisy.npy"
    np.save(path, noisy.astype(np.uint8))
    opts = dict(spacing=(1.0, 1.0, 1.0), min_object_size=4.0, max_hole_size=6.0, n_radii=0,
                tree=None)
    whole = sm.analyze(path, memory_limit="20GB", **opts)
    slabs = sm.analyze(path, memory_limit=_planes_limit(ph.mask.shape, 90), **opts)
    assert slabs.summary["n_chunks"] >= 2
    for key in ("n_nodes", "n_branches", "cycle_rank", "total_length", "volume_fraction"):
        assert slabs.summary[key] == pytest.approx(whole.summary[key], rel=1e-9), key
    raw = sm.analyze(path, memory_limit="20GB", spacing=(1.0, 1.0, 1.0), n_radii=0, tree=None)
    assert raw.summary["volume_fraction"] != whole.summary["volume_fraction"]
    assert [s["step"] for s in slabs.summary["preprocessing"]][1:3] == ["speck removal",
                                                                       "hole filling"]
    with pytest.raises(InputError, match="holes can be filled only up to a size"):
        sm.analyze(path, memory_limit=_planes_limit(ph.mask.shape, 90), spacing=(1.0, 1.0, 1.0),
                   max_hole_size=float("inf"), n_radii=0, tree=None)
    with pytest.raises(InputError, match="can reach at most"):
        sm.analyze(path, memory_limit=_planes_limit(ph.mask.shape, 90), spacing=(1.0, 1.0, 1.0),
                   min_object_size=1000.0, n_radii=0, tree=None)


def test_readers_return_the_same_planes(tmp_path):
    pytest.importorskip("zarr")
    rng = np.random.default_rng(1)
    data = rng.integers(0, 255, (20, 30, 40), dtype=np.uint8)
    # OME-Zarr: voxel size and unit from the NGFF metadata
    write_ome_zarr(tmp_path / "scan.zarr", data, (2.0, 0.5, 0.5), chunks=(7, 16, 16))
    z = open_volume(tmp_path / "scan.zarr")
    assert z.kind == "ome-zarr" and z.spacing == (2.0, 0.5, 0.5) and z.unit == "um"
    # compressed multi-page TIFF: read page by page
    tifffile.imwrite(tmp_path / "packed.tif", data, compression="zlib")
    t = open_volume(tmp_path / "packed.tif", spacing=(1, 1, 1))
    assert t.kind == "tiff pages"
    # uncompressed TIFF and .npy: plain file reads at the data offset
    write_tiff(tmp_path / "plain.tif", data, (1.0, 1.0, 1.0))
    m = open_volume(tmp_path / "plain.tif")
    assert m.kind == "file reads"
    np.save(tmp_path / "plain.npy", data)
    npy = open_volume(tmp_path / "plain.npy", spacing=1)
    assert npy.kind == "file reads"
    # folder of slices, read one file per plane
    folder = tmp_path / "slices"
    folder.mkdir()
    for i, plane in enumerate(data):
        tifffile.imwrite(folder / f"s{i}.tif", plane)
    f = open_volume(folder, spacing=(1, 1, 1))
    assert f.kind == "slice folder"
    import pickle
    for vol in (z, t, m, npy, f):
        np.testing.assert_array_equal(vol.planes(5, 12), data[5:12])
        again = pickle.loads(pickle.dumps(vol))  # workers reopen the file
        np.testing.assert_array_equal(again.planes(0, 3), data[:3])
    # read_image reads a small store whole
    img = sm.read_image(tmp_path / "scan.zarr")
    np.testing.assert_array_equal(img.array, data)
    assert img.spacing == (2.0, 0.5, 0.5)


def test_bad_large_inputs_get_one_line_errors(tmp_path):
    pytest.importorskip("zarr")
    with pytest.raises(InputError, match="not a size"):
        parse_memory("lots")
    with pytest.raises(InputError, match="positive"):
        parse_memory("0GB")
    with pytest.raises(InputError, match="per slab"):
        plan_slabs((2048, 2048, 2048), parse_memory("40MB"), 32)
    (tmp_path / "empty.zarr").mkdir()
    (tmp_path / "empty.zarr" / ".zgroup").write_text('{"zarr_format": 2}')
    with pytest.raises(ImageReadError, match="no OME multiscales"):
        open_volume(tmp_path / "empty.zarr")
    np.save(tmp_path / "cut.npy", np.zeros((40, 40, 40), np.uint8))
    with open(tmp_path / "cut.npy", "r+b") as fh:
        fh.truncate(20000)
    with pytest.raises(ImageReadError, match="truncated"):
        open_volume(tmp_path / "cut.npy")
    write_ome_zarr(tmp_path / "flat.zarr", np.zeros((1, 8, 8), np.uint8) + 1, (1, 1, 1))
    with pytest.raises(InputError):
        sm.analyze(tmp_path / "flat.zarr", memory_limit=1)


def _cylinder_roi(shape, radius_fraction=0.42):
    """A cylinder along the first axis, as the field of view of a micro-CT scan."""
    y, x = np.ogrid[:shape[1], :shape[2]]
    r = radius_fraction * min(shape[1:])
    inside = (y - shape[1] / 2) ** 2 + (x - shape[2] / 2) ** 2 <= r ** 2
    roi = np.broadcast_to(inside, shape).copy()
    roi[:3] = roi[-5:] = False  # and not the end planes
    return roi.astype(np.uint8)


@pytest.mark.parametrize("grey,smooth", [(False, None), (True, None), (True, 1.0)])
def test_roi_file_in_slabs_equals_in_memory(tmp_path, grey, smooth):
    """--roi FILE in slabs: the same box, threshold inside the ROI (Otsu from
    the streamed histogram), clipping, clean-ups and graph as in memory."""
    ph = foam(size=144.0, cell=16.0, rod_radius=2.5, seed=6, spacing=(1.25, 1.0, 1.0))
    shape = ph.mask.shape
    roi = _cylinder_roi(shape)
    roi_path = tmp_path / "roi.npy"
    np.save(roi_path, roi)
    if grey:  # brighter outside the ROI, so a threshold over the whole box would differ
        rng = np.random.default_rng(6)
        scan = np.where(ph.mask, 150, 70) + rng.integers(0, 40, shape)
        scan = np.where(roi > 0, scan, 200).astype(np.uint8)
    else:
        scan = ph.mask.astype(np.uint8)
    path = tmp_path / "scan.npy"
    np.save(path, scan)
    whole = sm.analyze(path, ph.spacing, memory_limit="20GB", roi=str(roi_path), n_radii=0,
                       tree=None, smooth=smooth)
    slabs = sm.analyze(path, ph.spacing, memory_limit=_planes_limit(shape, 80),
                       roi=str(roi_path), n_radii=0, tree=None, smooth=smooth)
    assert whole.summary["n_chunks"] == 1 and slabs.summary["n_chunks"] >= 2
    for key in ("n_nodes", "n_branches", "cycle_rank", "total_length", "volume_fraction",
                "mean_radius"):
        assert slabs.summary[key] == pytest.approx(whole.summary[key], rel=1e-12), key
    np.testing.assert_array_equal(slabs.graph.nodes, whole.graph.nodes)
    np.testing.assert_array_equal(slabs.graph.edges, whole.graph.edges)
    assert slabs.summary["roi"] == whole.summary["roi"]
    assert slabs.summary["image_shape"] == list(shape)
    steps = [s["step"] for s in slabs.summary["preprocessing"]]
    assert steps[0] == "region of interest" and "clip to ROI" in steps
    if grey:
        ours = [s for s in slabs.summary["preprocessing"] if s["step"] == "threshold"][0]
        theirs = [s for s in whole.summary["preprocessing"] if s["step"] == "threshold"][0]
        assert ours["value"] == pytest.approx(theirs["value"])
        assert "inside the ROI" in ours["method"]
        assert "hole filling" in steps  # the default clean-ups of a grey scan, clipped again
    # No structure leaves the ROI: every centreline point lies inside it (or
    # within the voxel that the polyline smoothing may move it).
    from scipy import ndimage as ndi
    near = ndi.binary_dilation(roi > 0, iterations=1)
    idx = np.round(slabs.graph.points / np.asarray(ph.spacing)).astype(int)
    assert near[tuple(idx.T)].all()


def test_roi_in_slabs_refusals(tmp_path):
    ph = foam(size=64.0, cell=16.0, rod_radius=2.5, seed=0)
    path = tmp_path / "scan.npy"
    np.save(path, ph.mask.astype(np.uint8))
    limit = _planes_limit(ph.mask.shape, 40)
    roi_path = tmp_path / "roi.npy"
    np.save(roi_path, _cylinder_roi(ph.mask.shape))
    np.save(roi_path, np.zeros(ph.mask.shape, np.uint8))
    with pytest.raises(InputError, match="ROI is empty"):
        sm.analyze(path, 1.0, memory_limit=limit, roi=str(roi_path))
    np.save(roi_path, np.ones((5, 5, 5), np.uint8))
    with pytest.raises(InputError, match="ROI has shape"):
        sm.analyze(path, 1.0, memory_limit=limit, roi=str(roi_path))


def test_cli_refuses_what_slabs_cannot_do(tmp_path):
    ph = foam(size=64.0, cell=16.0, rod_radius=2.5, seed=0)
    path = tmp_path / "scan.tif"
    write_tiff(path, ph.mask.astype(np.uint8), ph.spacing)
    run = subprocess.run([sys.executable, "-m", "skelmorph.cli", "analyze", str(path),
                          "--memory-limit", "1MB", "--roi", "auto", "-q"],
                         capture_output=True, text=True)
    assert run.returncode == 2
    assert "--roi auto needs the whole image" in run.stderr
    assert len(run.stderr.strip().splitlines()) == 1
    run = subprocess.run([sys.executable, "-m", "skelmorph.cli", "analyze", str(path),
                          "--memory-limit", "10kB", "-q"], capture_output=True, text=True)
    assert run.returncode == 2 and "per slab" in run.stderr
    big = foam(size=96.0, cell=16.0, rod_radius=2.5, seed=0)
    path = tmp_path / "big.tif"
    write_tiff(path, big.mask.astype(np.uint8), big.spacing)
    limit = str(_planes_limit(big.mask.shape, 80))
    run = subprocess.run([sys.executable, "-m", "skelmorph.cli", "analyze", str(path),
                          "--memory-limit", limit, "--n-radii", "0", "--no-figures", "-q",
                          "-o", str(tmp_path / "out")], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert re.search(r"analysed in \d+ slabs read from the file", run.stdout)


def test_slabs_on_a_dask_cluster(tmp_path):
    """The same slabs run on a local Dask cluster (worker processes)."""
    distributed = pytest.importorskip("distributed")
    ph = foam(size=96.0, cell=16.0, rod_radius=2.5, seed=4)
    path = tmp_path / "scan.npy"
    np.save(path, ph.mask)
    vol = open_volume(path, spacing=(1, 1, 1))
    limit = _planes_limit(ph.mask.shape, 80)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        cs = chunked_skeleton(vol, survey(vol), (1.0, 1.0, 1.0), memory_limit=limit,
                              workdir=tmp_path / "slabs", scheduler=cluster.scheduler_address)
    assert len(cs.slabs) >= 3
    np.testing.assert_array_equal(cs.coords, np.argwhere(thin(ph.mask)))


def test_bone_measures_in_slabs_equal_the_whole(tmp_path):
    """BV/TV, BS/BV, SMI, the Euler characteristics and Conn.D add up over
    slabs (the slab-wise code reads planes on demand), DA from intercept
    counts summed over slabs, Tb.Th and Tb.Sp from local thickness with
    halos as deep as the largest sphere: equal to the whole volume's bone
    set, which is itself checked against scikit-image, the Odgaard &
    Gundersen box formula and analytic plates in test_measure.py."""
    from skelmorph.measure.bone import bone_measures
    ph = foam(size=96.0, cell=16.0, rod_radius=2.5, seed=6, spacing=(1.5, 1.0, 1.0))
    # Mirrored copies stacked: tall enough for slabs of the local thickness
    # (40 bytes per voxel) under a limit that also cuts the thinning.
    mask = np.concatenate([ph.mask, ph.mask[::-1]] * 2)
    path = tmp_path / "scan.npy"
    np.save(path, mask)
    whole = bone_measures(mask, ph.spacing)
    res = sm.analyze(path, spacing=ph.spacing, memory_limit=_planes_limit(mask.shape, 200),
                     measures="bone", tree=None, n_radii=0, out=tmp_path / "out")
    s = res.summary
    assert s["n_chunks"] >= 2
    for key in ("BV/TV", "BS/BV", "Conn.D", "euler_characteristic",
                "euler_edge_corrected", "cavities", "DA"):
        assert s[key] == pytest.approx(whole[key], rel=1e-9, abs=1e-12), key
    # SMI's dS/dr is a small difference of two large areas: the smoothed
    # mesh's area summed over plane ranges differs by ~1e-9, SMI by ~1e-7.
    assert s["SMI"] == pytest.approx(whole["SMI"], rel=1e-6)
    # float32 maps, summed in float64 here and by numpy's float32 mean there
    for key in ("Tb.Th", "Tb.Th.SD", "Tb.Sp", "Tb.Sp.SD", "Tb.N"):
        assert s[key] == pytest.approx(whole[key], rel=1e-6), key
    assert s["Tb.N.direct"] == pytest.approx(whole["Tb.N.direct"], rel=1e-6)
    assert "pBV/TV" not in s and "plate" in s["skipped_measures"]["bone"]
    assert s["skeleton_gap_halo"] > 0
    assert s["thickness_halo"] > 0 and s["separation_halo"] >= s["thickness_halo"]
    # slab-wise code with slabs of a few planes (many slab faces) gives the same
    from skelmorph.chunked import LazyMask
    from skelmorph.measure.bone import euler_in_region, surface_and_smi
    vol = open_volume(path, spacing=ph.spacing)
    lazy = LazyMask(vol, survey(vol), int(np.count_nonzero(mask)))
    bs, smi = surface_and_smi(lazy, ph.spacing, whole["BV"], slab_voxels=96 * 96 * 9)
    assert bs == pytest.approx(whole["BS"], rel=1e-9) and smi == pytest.approx(whole["SMI"])
    assert euler_in_region(lazy, True, slab_voxels=96 * 96 * 5) == \
        pytest.approx(whole["euler_edge_corrected"])
    # A limit that cuts the thinning but cannot hold a thickness slab: the
    # rest of the set is there, and the summary says what is missing.
    small = sm.analyze(path, spacing=ph.spacing, memory_limit=_planes_limit(mask.shape, 100),
                       measures="bone", tree=None, n_radii=0).summary
    assert "Tb.Th" not in small and "Tb.Th" in small["skipped_measures"]["bone"]
    assert small["DA"] == pytest.approx(whole["DA"], rel=1e-9)


def test_bone_measures_with_an_roi_in_slabs_equal_in_memory(tmp_path):
    """--measures bone with an ROI file in slabs: TV from the ROI, surfaces,
    edge-corrected Euler characteristic and intercepts inside it, Tb.Th,
    Tb.Sp and Tb.N.direct with its outside as no wall, all in the ROI's
    tight box: equal to the analysis in memory (whose ROI handling is
    checked in test_measure.py)."""
    ph = foam(size=96.0, cell=16.0, rod_radius=2.5, seed=6, spacing=(1.5, 1.0, 1.0))
    mask = np.concatenate([ph.mask, ph.mask[::-1]] * 2)
    roi = _cylinder_roi(mask.shape)
    path, roi_path = tmp_path / "scan.npy", tmp_path / "roi.npy"
    np.save(path, mask.astype(np.uint8))
    np.save(roi_path, roi)
    kw = dict(spacing=ph.spacing, roi=str(roi_path), measures="bone", tree=None, n_radii=0)
    whole = sm.analyze(path, memory_limit="20GB", **kw).summary
    s = sm.analyze(path, memory_limit=_planes_limit(mask.shape, 160), **kw).summary
    assert whole["n_chunks"] == 1 and s["n_chunks"] >= 2
    assert whole["TV"] == pytest.approx(np.count_nonzero(roi) * np.prod(ph.spacing))
    for key in ("TV", "BV", "BV/TV", "BS/BV", "Conn.D", "euler_characteristic",
                "euler_edge_corrected", "cavities", "DA", "n_branches"):
        assert s[key] == pytest.approx(whole[key], rel=1e-9, abs=1e-12), key
    assert s["SMI"] == pytest.approx(whole["SMI"], rel=1e-6)  # see the test above
    for key in ("Tb.Th", "Tb.Th.SD", "Tb.Sp", "Tb.Sp.SD", "Tb.N", "Tb.N.direct"):
        assert s[key] == pytest.approx(whole[key], rel=1e-6), key
    assert s["roi"] == whole["roi"]


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 1.0, 1.0)])
def test_local_thickness_in_slabs_on_a_coarse_lattice(spacing):
    """Plates 80 voxels apart with a rod: the space's largest sphere needs a
    lattice step of 2 and halos of about 80 planes; slabs of 160 planes give
    the whole volume's Tb.Sp and its SD (isotropic and 2:1:1 voxels)."""
    from skelmorph.chunked import Segmenter
    from skelmorph.measure.bone import bone_measures
    from skelmorph.slab_thickness import slab_local_thickness
    nz = int(806 / spacing[0])
    z = np.arange(nz) * spacing[0]
    m = np.zeros((nz, 40, 40), bool)
    m[(z % 80) < 6] = True
    m[:, 10:14, 10:14] = True
    whole = bone_measures(m, spacing)
    vol = ArrayVolume(m.astype(np.uint8), spacing, "um")
    limit = 40 * 40 * 40 * int(320 / spacing[0])
    mean, sd, step, halo = slab_local_thickness(vol, Segmenter("binary", 0), spacing, "space",
                                                limit)
    assert step == whole["separation_lattice_step"] == 2
    assert (nz - 2 * halo) // 16 * 16 < nz  # really cut into slabs
    assert mean == pytest.approx(whole["Tb.Sp"], rel=1e-6)
    assert sd == pytest.approx(whole["Tb.Sp.SD"], rel=1e-5)
    mean, sd, _, _ = slab_local_thickness(vol, Segmenter("binary", 0), spacing, "solid", limit)
    assert mean == pytest.approx(whole["Tb.Th"], rel=1e-6)


def test_real_label_map_in_slabs_equals_in_memory(tmp_path):
    """pyvista's frog tissue label map (an open dataset the package registry
    carries), label 1 (blood), as a .npy label volume: the slabs and the
    whole volume in memory give the same network."""
    examples = pytest.importorskip("pyvista.examples")
    v = examples.load_frog_tissues()
    labels = np.asarray(v.point_data[v.array_names[0]]).reshape(v.dimensions[::-1])
    spacing = tuple(float(s) for s in v.spacing[::-1])
    path = tmp_path / "frog.npy"
    np.save(path, labels.astype(np.uint8))
    opts = dict(spacing=spacing, label=1, tree=None, n_radii=0, figures=False)
    whole = sm.analyze(path, memory_limit="20GB", **opts).summary
    slabs = sm.analyze(path, memory_limit=_planes_limit(labels.shape, 100),
                       out=tmp_path / "out", **opts).summary
    assert whole["n_chunks"] == 1 and slabs["n_chunks"] >= 2
    for key in ("n_nodes", "n_branches", "n_components", "cycle_rank", "total_length",
                "mean_radius", "volume_fraction"):
        assert slabs[key] == pytest.approx(whole[key], rel=1e-12), key


def test_cavities_of_a_large_mask_counted_in_slabs(monkeypatch):
    """count_cavities labels a large 3D mask slab by slab: hollow balls cut
    by slab faces (two of them by the same face) and noise give the count
    of one labelling of the whole (scipy's ndimage.label, reference
    library); the 5 hollow balls alone give 5 (constructed)."""
    from skelmorph import segment
    zz, yy, xx = np.indices((40, 30, 34))
    hollow = np.zeros(zz.shape, bool)
    for c in ((8, 8, 8), (10, 20, 24), (20, 8, 24), (20, 21, 9), (31, 15, 17)):
        d2 = (zz - c[0]) ** 2 + (yy - c[1]) ** 2 + (xx - c[2]) ** 2
        hollow |= (d2 < 36) & (d2 >= 9)
    noisy = hollow | (np.random.default_rng(2).random(zz.shape) < 0.45)
    whole = [segment.count_cavities(m) for m in (hollow, noisy)]
    assert whole[0] == 5 and whole[1] > 5
    monkeypatch.setattr(segment, "CAVITY_SLAB_VOXELS", 7 * 30 * 34)  # slabs of 7 planes
    assert [segment.count_cavities(m) for m in (hollow, noisy)] == whole
