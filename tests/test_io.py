"""Reading images, voxel sizes, and every kind of bad input."""

import os

import numpy as np
import pytest
import tifffile

import skelmorph as sm
from skelmorph import phantoms as ph
from skelmorph.errors import ImageReadError, InputError, SkelmorphError, SpacingError
from skelmorph.io import read_image, write_tiff


def test_tiff_roundtrip_keeps_voxel_size(tmp_path):
    p = ph.torus(spacing=(2.0, 0.5, 0.5))
    write_tiff(tmp_path / "t.tif", p.mask, p.spacing, "um")
    arr, spacing, unit = read_image(tmp_path / "t.tif")
    assert arr.shape == p.mask.shape
    assert spacing == pytest.approx((2.0, 0.5, 0.5))
    assert unit == "um"


def test_key_value_description_and_resolution_tags(tmp_path):
    # The common key=value page description (unit, slice spacing) with
    # resolution tags in pixels per unit (common practice in microscopy files).
    data = np.zeros((4, 10, 12), np.uint8)
    tifffile.imwrite(tmp_path / "kv.tif", data, resolution=(1 / 0.25, 1 / 0.2), metadata=None,
                     photometric="minisblack",
                     description="images=4\nslices=4\nunit=micron\nspacing=3.0\n")
    _, spacing, unit = read_image(tmp_path / "kv.tif")
    assert spacing == pytest.approx((3.0, 0.2, 0.25)) and unit == "um"


def test_centimetre_resolution_tags(tmp_path):
    tifffile.imwrite(tmp_path / "cm.tif", np.zeros((10, 12), np.uint8),
                     resolution=(1000.0, 500.0), resolutionunit="CENTIMETER")
    _, spacing, unit = read_image(tmp_path / "cm.tif")
    assert spacing == pytest.approx((20.0, 10.0)) and unit == "um"


def test_given_spacing_overrides_file_with_warning(tmp_path):
    write_tiff(tmp_path / "t.tif", np.eye(8, dtype=bool), (1.0, 1.0))
    with pytest.warns(UserWarning, match="using the given spacing"):
        _, spacing, _ = read_image(tmp_path / "t.tif", spacing=(2.0, 2.0))
    assert spacing == (2.0, 2.0)


def test_missing_spacing_warns_and_uses_one(tmp_path):
    np.save(tmp_path / "a.npy", np.eye(6))
    with pytest.warns(UserWarning, match="no voxel size"):
        _, spacing, _ = read_image(tmp_path / "a.npy")
    assert spacing == (1.0, 1.0)


def test_folder_of_slices_in_natural_order(tmp_path):
    import imageio.v3 as iio

    for i in (1, 2, 10):
        iio.imwrite(tmp_path / f"slice{i}.png", np.full((5, 6), i, np.uint8))
    arr, spacing, _ = read_image(tmp_path, spacing=(4.0, 1.0, 1.0))
    assert arr.shape == (3, 5, 6)
    assert list(arr[:, 0, 0]) == [1, 2, 10]
    assert spacing == (4.0, 1.0, 1.0)


def test_folder_with_mismatched_slices(tmp_path):
    import imageio.v3 as iio

    iio.imwrite(tmp_path / "a1.png", np.zeros((5, 6), np.uint8))
    iio.imwrite(tmp_path / "a2.png", np.zeros((5, 7), np.uint8))
    with pytest.raises(ImageReadError, match="same size"):
        read_image(tmp_path, spacing=1.0)


def test_large_tiff_is_memory_mapped(tmp_path):
    write_tiff(tmp_path / "big.tif", np.zeros((8, 64, 64), bool), (1.0, 1.0, 1.0))
    arr, _, _ = read_image(tmp_path / "big.tif")
    assert isinstance(arr, np.memmap)


def test_colour_image_needs_a_channel(tmp_path):
    import imageio.v3 as iio

    rgb = np.zeros((20, 30, 3), np.uint8)
    rgb[..., 1] = 200
    iio.imwrite(tmp_path / "c.png", rgb)
    with pytest.raises(ImageReadError, match="colour"):
        read_image(tmp_path / "c.png")
    arr, _, _ = read_image(tmp_path / "c.png", channel=1, spacing=1.0)
    assert arr.shape == (20, 30) and arr.max() == 200


@pytest.mark.parametrize("content", [b"", b"II*\x00garbage", b"not an image at all"])
def test_corrupt_tiff(tmp_path, content):
    (tmp_path / "bad.tif").write_bytes(content)
    with pytest.raises(ImageReadError, match="cannot read TIFF"):
        read_image(tmp_path / "bad.tif")


def test_truncated_tiff(tmp_path):
    write_tiff(tmp_path / "t.tif", np.ones((6, 40, 40), bool), (1.0, 1.0, 1.0))
    data = (tmp_path / "t.tif").read_bytes()
    (tmp_path / "cut.tif").write_bytes(data[: len(data) // 3])
    with pytest.raises(ImageReadError):
        read_image(tmp_path / "cut.tif")


def test_missing_and_unsupported_paths(tmp_path):
    with pytest.raises(ImageReadError, match="no such file"):
        read_image(tmp_path / "nope.tif")
    (tmp_path / "x.xyz").write_text("1")
    with pytest.raises(ImageReadError, match="unknown image type"):
        read_image(tmp_path / "x.xyz")
    (tmp_path / "empty").mkdir()
    with pytest.raises(ImageReadError, match="no image slices"):
        read_image(tmp_path / "empty")


@pytest.mark.parametrize("spacing", [0, -1, (1, 0, 1), (1, np.nan, 1), (1, 2), "abc", (1, np.inf, 1)])
def test_bad_spacing(spacing):
    with pytest.raises(SpacingError):
        sm.skeleton_graph(ph.torus().mask, spacing)


def test_bad_masks():
    with pytest.raises(InputError, match="empty"):
        sm.skeleton_graph(np.zeros((10, 10, 10), bool))
    with pytest.raises(InputError, match="all foreground"):
        sm.skeleton_graph(np.ones((10, 10, 10), bool))
    with pytest.raises(InputError, match="2D or 3D"):
        sm.skeleton_graph(np.zeros((3, 4, 5, 6), bool))
    with pytest.raises(InputError, match="2D or 3D"):
        sm.skeleton_graph(np.zeros(10, bool))
    with pytest.raises(InputError, match="colour"):
        sm.skeleton_graph(np.zeros((20, 20, 3), bool))
    nan = np.zeros((10, 10))
    nan[3, 3] = np.nan
    with pytest.raises(InputError, match="NaN"):
        sm.to_mask(nan)
    with pytest.raises(InputError, match="binary"):
        sm.skeleton_graph(np.random.default_rng(0).random((10, 10)))
    with pytest.raises(InputError, match="numeric"):
        sm.skeleton_graph(np.array([["a", "b"], ["c", "d"]]))


def test_single_voxel_object():
    mask = np.zeros((9, 9, 9), bool)
    mask[4, 4, 4] = True
    s = sm.summarize(sm.skeleton_graph(mask))
    assert (s["n_nodes"], s["n_branches"], s["n_components"], s["total_length"]) == (1, 0, 1, 0.0)


def test_absurd_size_is_refused_before_allocation():
    big = np.lib.stride_tricks.as_strided(np.zeros(1, np.uint8), shape=(40000, 40000, 40000),
                                          strides=(0, 0, 0))
    with pytest.raises(InputError, match="voxels|memory"):
        sm.skeleton_graph(big)


def test_errors_are_value_errors():
    assert issubclass(SkelmorphError, ValueError)


def test_grey_image_is_thresholded_and_cleaned():
    p = ph.torus()
    rng = np.random.default_rng(0)
    grey = p.mask * 150.0 + rng.normal(40, 5, p.mask.shape)
    grey[2, 2, 2] = 255  # a speck
    mask = sm.to_mask(grey)
    assert not mask[2, 2, 2]
    assert np.count_nonzero(mask ^ p.mask) < 0.01 * p.mask.sum()
    dark = sm.to_mask(255 - grey, dark=True)
    assert np.array_equal(dark, mask)


@pytest.mark.parametrize("umask, expected", [(0o022, 0o644), (0o077, 0o600), (0o002, 0o664)])
def test_written_files_respect_umask(tmp_path, umask, expected):
    """Atomic writes give files the mode a plain open() would (POSIX: 0666
    minus the umask), not the private mode of their temporary file."""
    import stat
    from skelmorph.io import write_csv, write_json
    old = os.umask(umask)
    try:
        write_json(tmp_path / "s.json", {"a": 1})
        write_csv(tmp_path / "t.csv", {"x": np.arange(3)})
    finally:
        os.umask(old)
    for name in ("s.json", "t.csv"):
        assert stat.S_IMODE((tmp_path / name).stat().st_mode) == expected


def test_large_graph_files_written_in_blocks_read_back(tmp_path):
    """GraphML and VTP are written block by block (20 000 edges, 3 MB of
    values at a time); networkx and pyvista (general-purpose readers) must
    read back every edge and point, across the block boundaries."""
    import networkx as nx
    pv = pytest.importorskip("pyvista")
    from skelmorph.graph import SkeletonGraph
    n_edges, per = 30_001, 7
    rng = np.random.default_rng(0)
    points = rng.normal(size=(n_edges * per, 3)).cumsum(axis=0)
    offsets = np.arange(0, n_edges * per + 1, per)
    nodes = np.concatenate([points[offsets[:-1]], points[offsets[1:] - 1]])
    edges = np.column_stack([np.arange(n_edges), np.arange(n_edges) + n_edges])
    g = SkeletonGraph(nodes=nodes, node_radius=np.ones(len(nodes)),
                      node_degree=np.ones(len(nodes), np.int64), edges=edges, points=points,
                      point_radius=rng.random(len(points)), offsets=offsets,
                      edge_length=np.ones(n_edges), spacing=(1.0, 1.0, 1.0), unit="um",
                      shape=(10, 10, 10), meta={})
    g.write(tmp_path / "g.graphml")
    h = nx.read_graphml(tmp_path / "g.graphml")
    assert h.number_of_nodes() == len(nodes) and h.number_of_edges() == n_edges
    last = h.edges[str(n_edges - 1), str(2 * n_edges - 1)]["points"]
    np.testing.assert_allclose(np.array(last.split(), float).reshape(-1, 3),
                               points[-per:], rtol=1e-5)
    g.write(tmp_path / "g.vtp")
    mesh = pv.read(tmp_path / "g.vtp")
    assert mesh.n_points == len(points) and mesh.n_cells == n_edges
    np.testing.assert_allclose(mesh["radius"], g.point_radius)
    np.testing.assert_allclose(mesh.points, g._vtk_points())


def test_csv_written_in_row_blocks_reads_back_whole(tmp_path, monkeypatch):
    """Tables are formatted a block of rows at a time; Python's csv module
    (general-purpose reader) must read back every cell, quoted and guarded
    ones included, as from one block."""
    import csv

    from skelmorph import io as skio
    rng = np.random.default_rng(0)
    x = rng.normal(size=10) * 1e3
    x[[2, 7]] = np.nan
    names = np.array(["a", "b,c", '"q"', "=1+2", "-1.5", "ok", "x", "y", "z", "-w"])
    table = {"x": x, "n": np.arange(10), "name": names}
    expect = [["x", "n", "name"]] + [
        ["" if np.isnan(v) else "%.6g" % v, str(i), skio.safe_cell(str(s))]
        for i, (v, s) in enumerate(zip(x, names))]
    for block in (3, 10, 1 << 16):
        monkeypatch.setattr(skio, "CSV_BLOCK_ROWS", block)
        skio.write_csv(tmp_path / "t.csv", table)
        with open(tmp_path / "t.csv", newline="", encoding="utf-8") as fh:
            assert list(csv.reader(fh)) == expect
    skio.write_csv(tmp_path / "empty.csv", {"x": np.zeros(0)})
    assert (tmp_path / "empty.csv").read_text() == "x\n"
