"""The cortical set (skelmorph.measure.cortical) on hollow and elliptic tubes
with analytic areas and thickness, and pores of known volume."""

import json

import numpy as np
import pytest

from skelmorph.cli import main
from skelmorph.errors import InputError
from skelmorph.io import write_tiff
from skelmorph.measure.cortical import cortical_measures


def elliptic_tube(outer, inner, length, spacing):
    """Axis 0 is the bone axis; semi-axes (y, x) in physical units."""
    sp = np.asarray(spacing, float)
    ny = int(np.ceil(2 * outer[0] / sp[1])) + 6
    nx = int(np.ceil(2 * outer[1] / sp[2])) + 6
    y = (np.arange(ny) - (ny - 1) / 2) * sp[1]
    x = (np.arange(nx) - (nx - 1) / 2) * sp[2]
    yy, xx = np.meshgrid(y, x, indexing="ij")
    shell = ((yy / outer[0]) ** 2 + (xx / outer[1]) ** 2 <= 1) & \
            ((yy / inner[0]) ** 2 + (xx / inner[1]) ** 2 > 1)
    nz = int(round(length / sp[0]))
    return np.repeat(shell[None], nz, axis=0), (yy, xx)


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 0.5, 0.5)])
def test_hollow_cylinder_areas_and_thickness(spacing):
    """Analytic: Tt.Ar = pi Ro^2, Ma.Ar = pi Ri^2, Ct.Ar = their difference,
    Ct.Th = Ro - Ri (the largest ball in a thick-walled tube spans the wall)."""
    ro, ri = 20.0, 12.0
    m, _ = elliptic_tube((ro, ro), (ri, ri), 40.0, spacing)
    s, slices = cortical_measures(m, spacing)
    assert s["Tt.Ar"] == pytest.approx(np.pi * ro ** 2, rel=0.015)
    assert s["Ma.Ar"] == pytest.approx(np.pi * ri ** 2, rel=0.03)
    assert s["Ct.Ar"] == pytest.approx(np.pi * (ro ** 2 - ri ** 2), rel=0.03)
    assert s["Ct.Ar/Tt.Ar"] == pytest.approx(1 - (ri / ro) ** 2, rel=0.03)
    assert s["Ct.Th"] == pytest.approx(ro - ri, rel=0.06)
    assert s["Ct.Po"] == 0 and s["pore_count"] == 0
    assert s["cortical_slices"] == len(slices["slice"]) == m.shape[0]
    # Tt.Ar = Ct.Ar + Ma.Ar + pores, slice by slice (definition).
    np.testing.assert_allclose(np.add(slices["Ct.Ar"], slices["Ma.Ar"]), slices["Tt.Ar"])


def test_elliptic_tube_areas():
    """Analytic: the area of an ellipse is pi a b."""
    m, _ = elliptic_tube((24.0, 16.0), (16.0, 8.0), 20.0, (1.0, 1.0, 1.0))
    s, _ = cortical_measures(m, (1.0, 1.0, 1.0))
    assert s["Tt.Ar"] == pytest.approx(np.pi * 24 * 16, rel=0.015)
    assert s["Ma.Ar"] == pytest.approx(np.pi * 16 * 8, rel=0.03)


def test_pores_of_known_volume():
    """Pores carved into the wall (construction): their number, and Ct.Po =
    carved volume / (bone + carved volume) exactly."""
    spacing = (1.0, 1.0, 1.0)
    m, (yy, xx) = elliptic_tube((20.0, 20.0), (10.0, 10.0), 40.0, spacing)
    zz = np.arange(m.shape[0])[:, None, None] + 0.5
    carved = np.zeros_like(m)
    rng = np.random.default_rng(0)
    for k, angle in enumerate(np.linspace(0, 2 * np.pi, 6, endpoint=False)):
        cy, cx, cz = 15 * np.sin(angle), 15 * np.cos(angle), 6 + 5 * k + rng.uniform(0, 1)
        carved |= ((yy - cy) ** 2 + (xx - cx) ** 2)[None] + (zz - cz) ** 2 <= 2.2 ** 2
    carved &= m
    bone = m & ~carved
    s, slices = cortical_measures(bone, spacing)
    assert s["pore_count"] == 6
    pore_v = np.count_nonzero(carved)
    assert s["Ct.Po"] == pytest.approx(pore_v / (np.count_nonzero(bone) + pore_v), rel=1e-12)
    assert s["mean_pore_volume"] == pytest.approx(pore_v / 6)
    assert sum(slices["pore_area"]) == pytest.approx(pore_v)


def test_cortical_set_from_the_command_line(tmp_path, capsys):
    m, _ = elliptic_tube((12.0, 12.0), (7.0, 7.0), 16.0, (1.0, 1.0, 1.0))
    write_tiff(tmp_path / "shaft.tif", m, (1.0, 1.0, 1.0))
    assert main(["analyze", str(tmp_path / "shaft.tif"), "--measures", "cortical", "-q",
                 "--n-radii", "0", "--tree", "none", "-o", str(tmp_path / "o")]) == 0
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert s["units"]["Tt.Ar"] == "um^2" and s["units"]["Ct.Th"] == "um"
    assert (tmp_path / "o" / "cortical_slices.csv").read_text().startswith("slice,position")
    with pytest.raises(InputError, match="3D image"):
        cortical_measures(m[0], (1.0, 1.0))
    write_tiff(tmp_path / "flat.tif", m[0], (1.0, 1.0))
    assert main(["analyze", str(tmp_path / "flat.tif"), "--measures", "cortical", "-q",
                 "-o", str(tmp_path / "f")]) == 2
    assert "3D image" in capsys.readouterr().err
