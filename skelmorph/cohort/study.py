"""Loading an analysed study folder: its finished samples, their scalar
measures and the long tables of profiles and barcodes."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import SkelmorphError

__all__ = ["load_study", "scalar_measures"]


def load_study(study, by="group"):
    """The finished samples of a study folder and their descriptors (pandas)."""
    import pandas as pd
    study = Path(study)
    f = study / "cohort.csv"
    if not f.exists():
        raise SkelmorphError(f"{study} has no cohort.csv; run 'skelmorph cohort run' first")
    cohort = pd.read_csv(f, dtype={"sample": str, "group": str})
    if by not in cohort.columns:
        raise SkelmorphError(f"column {by!r} is not in {f}; columns: {', '.join(cohort.columns)}")
    cohort = cohort[cohort[by].notna() & (cohort[by].astype(str) != "")].reset_index(drop=True)
    cohort[by] = cohort[by].astype(str)
    if "unit" in cohort.columns:
        units = sorted(set(cohort["unit"].dropna().astype(str)))
        if len(units) > 1:
            raise SkelmorphError(f"the study mixes length units ({', '.join(units)}); its "
                                 "measures cannot be compared as they are: give every sample's "
                                 "spacing in one unit in the manifest and re-run")
    if len(cohort) < 2:
        raise SkelmorphError(f"need at least two finished samples with a {by!r}; found {len(cohort)}")

    def long(name):
        p = study / name
        if p.exists() and p.stat().st_size > 2:
            t = pd.read_csv(p, dtype={"sample": str, "group": str})
            return t[t["sample"].isin(cohort["sample"])]
        return None

    failures = []
    fp = study / "failures.csv"
    if fp.exists() and fp.stat().st_size > 2:
        failures = pd.read_csv(fp, dtype=str).fillna("").to_dict("records")
    return {"cohort": cohort, "profiles": long("profiles.csv"), "barcodes": long("barcodes.csv"),
            "failures": failures, "by": by}


def scalar_measures(cohort):
    """Numeric summary columns that are structure measures of the results
    registry (:mod:`skelmorph.results`; not processing records or manifest
    metadata) and vary across samples (pandas DataFrame)."""
    from ..results import PROCESSING_KEYS, lookup
    num = cohort.select_dtypes(include=[np.number])
    keep = [c for c in num.columns if lookup(c) is not None and c not in PROCESSING_KEYS
            and lookup(c).kind != "identifier"
            and num[c].notna().mean() >= 0.5 and np.nanstd(num[c].to_numpy(float)) > 0]
    return num[keep]
