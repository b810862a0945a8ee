"""The cortical bone set, slice by slice along the bone axis.

Names and definitions follow the micro-CT guideline (Bouxsein ML et al. 2010,
J Bone Miner Res 25:1468, Table 2): in each cross-section (a plane normal to
axis 0, the bone's long axis) the periosteal envelope encloses the total
area Tt.Ar; the medullary cavity (the largest enclosed space) is Ma.Ar; the
bone itself is Ct.Ar; the area fraction is Ct.Ar/Tt.Ar.  Cortical thickness
Ct.Th is the mean of the maximal-sphere local thickness of the bone in 3D
(Hildebrand & Rüegsegger 1997), with its SD.  Enclosed spaces other than the
medullary cavity are pores: cortical porosity Ct.Po = pore volume / (bone +
pore volume), with the number of pores (3D, 26-connected) and their mean
volume.  The pore measures' names are ours.

Research measurements of image structure, not a clinical assessment.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from ..errors import InputError
from .thickness import bounded_local_thickness

__all__ = ["cortical_measures"]


def _slice_regions(section):
    """Envelope, medullary cavity and pores of one cross-section (bool 2D)."""
    envelope = ndi.binary_fill_holes(section)
    holes = envelope & ~section
    labels, n = ndi.label(holes)
    if n == 0:
        return envelope, np.zeros_like(section), holes
    sizes = np.bincount(labels.ravel())[1:]
    marrow = labels == (int(np.argmax(sizes)) + 1)
    return envelope, marrow, holes & ~marrow


def cortical_measures(mask, spacing, unit="um"):
    """Cortical bone measures of a 3D image whose axis 0 is the bone axis.

    Parameters
    ----------
    mask : bool array (3D)
        The bone (a diaphysis or any tube-like shell), one piece per slice.
    spacing : sequence of 3 float
    unit : str

    Returns
    -------
    summary : dict
        Means over the slices holding bone of ``Tt.Ar``, ``Ct.Ar``, ``Ma.Ar``
        (unit^2) and ``Ct.Ar/Tt.Ar``; ``Ct.Th``, ``Ct.Th.SD`` (unit);
        ``Ct.Po`` (1), ``pore_count`` and ``mean_pore_volume`` (unit^3).
    slices : dict
        Per slice: ``slice``, ``position`` (unit along axis 0), ``Tt.Ar``,
        ``Ct.Ar``, ``Ma.Ar``, ``Ct.Ar/Tt.Ar``, ``pore_area``.

    Examples
    --------
    A hollow cylinder of radii 10 and 6 voxels: the areas are close to
    pi 10^2 and pi 6^2.

    >>> import numpy as np
    >>> yy, xx = np.mgrid[-16:17, -16:17]
    >>> ring = (yy ** 2 + xx ** 2 <= 100) & (yy ** 2 + xx ** 2 > 36)
    >>> s, _ = cortical_measures(np.repeat(ring[None], 12, axis=0), (1.0, 1.0, 1.0))
    >>> round(s["Tt.Ar"] / (np.pi * 100), 2), round(s["Ma.Ar"] / (np.pi * 36), 2)
    (1.01, 1.0)
    """
    m = np.asarray(mask, bool)
    if m.ndim != 3:
        raise InputError(f"the cortical set needs a 3D image with the bone along axis 0; "
                         f"this one is {m.ndim}D")
    if not m.any():
        raise InputError("the cortical set needs some bone; the mask is empty")
    sp = np.asarray(spacing, float)
    pixel = float(sp[1] * sp[2])
    voxel = float(np.prod(sp))
    rows = {"slice": [], "position": [], "Tt.Ar": [], "Ct.Ar": [], "Ma.Ar": [],
            "Ct.Ar/Tt.Ar": [], "pore_area": []}
    pores = np.zeros_like(m)
    for z in range(m.shape[0]):
        if not m[z].any():
            continue
        envelope, marrow, pore = _slice_regions(m[z])
        pores[z] = pore
        tt = float(np.count_nonzero(envelope)) * pixel
        ct = float(np.count_nonzero(m[z])) * pixel
        rows["slice"].append(z)
        rows["position"].append(z * float(sp[0]))
        rows["Tt.Ar"].append(tt)
        rows["Ct.Ar"].append(ct)
        rows["Ma.Ar"].append(float(np.count_nonzero(marrow)) * pixel)
        rows["Ct.Ar/Tt.Ar"].append(ct / tt)
        rows["pore_area"].append(float(np.count_nonzero(pore)) * pixel)
    from ..thinning import distance_map_sq
    d = distance_map_sq(m, sp)
    np.sqrt(d, out=d)
    th, _ = bounded_local_thickness(m, d, sp)
    del d
    labels, n_pores = ndi.label(pores, structure=np.ones((3, 3, 3), bool))
    bone_v = float(np.count_nonzero(m)) * voxel
    pore_v = float(np.count_nonzero(pores)) * voxel
    summary = {key: float(np.mean(rows[key])) for key in ("Tt.Ar", "Ct.Ar", "Ma.Ar",
                                                           "Ct.Ar/Tt.Ar")}
    summary.update({
        "Ct.Th": float(th[m].mean()), "Ct.Th.SD": float(th[m].std()),
        "Ct.Po": pore_v / (bone_v + pore_v),
        "pore_count": int(n_pores),
        "mean_pore_volume": pore_v / n_pores if n_pores else 0.0,
        "cortical_slices": len(rows["slice"]),
    })
    return summary, rows
