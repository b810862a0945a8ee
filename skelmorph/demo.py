"""The built-in demonstration: an invented two-group study on phantom data.

Scenario (entirely made up): a lab prints porous scaffolds and asks whether
a month in a degradation bath changes their strut network.  Eight scans of
``fresh`` scaffolds are compared with eight ``bathed`` ones, whose struts
have thinned and partly broken.  Each scan is a seeded open-cell foam
phantom written as a TIFF with its voxel size; the study then runs exactly
as ``skelmorph cohort run`` and ``skelmorph cohort compare`` would.
"""

from __future__ import annotations

import os
from pathlib import Path

from .io import write_csv, write_tiff
from .phantoms import foam

__all__ = ["run_demo", "DEMO_GROUPS", "DEMO_OPTIONS"]

#: group -> foam parameters (physical units: um)
DEMO_GROUPS = {
    "fresh": dict(rod_radius=2.6, break_fraction=0.0),
    "bathed": dict(rod_radius=2.1, break_fraction=0.12),
}
SAMPLES_PER_GROUP = 8
CELL = 16.0  # um
EXTENT = 80.0  # um per side
SPACING = (1.0, 1.0, 1.0)  # um, isotropic voxels
#: Analysis options of the demo study (the keywords of skelmorph.analyze).
DEMO_OPTIONS = {"measures": ["bone"], "n_radii": 100, "figures": False}


def make_scans(folder):
    """Write the phantom scans and the manifest; returns the manifest path."""
    folder = Path(folder)
    scans = folder / "scans"
    scans.mkdir(parents=True, exist_ok=True)
    rows = {"sample": [], "path": [], "group": [], "spacing": []}
    seed = 100
    for group, params in DEMO_GROUPS.items():
        for i in range(SAMPLES_PER_GROUP):
            seed += 1
            sample = f"{group}-{i + 1:02d}"
            path = scans / f"{sample}.tif"
            if not path.exists():
                ph = foam(size=EXTENT, cell=CELL, seed=seed, spacing=SPACING, **params)
                write_tiff(path, ph.mask, ph.spacing, ph.unit)
            rows["sample"].append(sample)
            rows["path"].append(f"scans/{sample}.tif")
            rows["group"].append(group)
            rows["spacing"].append(" ".join(str(s) for s in SPACING))
    manifest = folder / "manifest.csv"
    write_csv(manifest, rows)
    return manifest


def run_demo(out="skelmorph-demo", progress=True, workers=None):
    """Make the study, analyse it, compare the groups, write the report page;
    returns the comparison dict."""
    from .cohort.compare import compare_cohort
    from .cohort.run import run_cohort
    out = Path(out)
    manifest = make_scans(out)
    workers = workers or min(2, os.cpu_count() or 1)
    from .report.html import write_report
    run_cohort(manifest, out / "study", options=DEMO_OPTIONS, workers=workers, progress=progress)
    result = compare_cohort(out / "study", by="group", n_repeats=5, n_permutations=100,
                           progress=progress)
    write_report(out / "study")
    return result
