"""Local thickness of a scan larger than memory, slab by slab (Tb.Th, Tb.Sp).

The local thickness at x is twice the largest r(c) with |x - c| < r(c),
where r is the distance to the other phase (Hildebrand & Rüegsegger 1997).
A slab read with a halo gives the whole volume's values on its core when:

* every centre whose ball reaches the core lies in the *band*, the core
  widened by half the halo, and
* the distance map is exact on the band.

Both hold when the slab's distance map is at most half the halo (less one
plane) on the band.  The slab's distance map is an upper bound of the true
one (walls beyond the slab are missing) and both are 1-Lipschitz; a centre
outside the band whose ball reached the core would force a value above that
bound on the band's edge, and a band value below the distance to the slab's
end is exact.  So the halo grows until the bound holds, as for the
centrelines (:mod:`skelmorph.chunked`).

Thick or wide phases are painted on a coarser lattice
(:func:`skelmorph.measure.thickness.bounded_local_thickness`).  Its step
comes from the largest radius of the whole phase, so a first pass finds
that radius slab by slab; slabs then start on a multiple of the step, so
every slab's lattice is the whole volume's.  The result equals the whole
volume's computation (tested); sums of the values and of their squares give
the mean and the standard deviation.
"""

from __future__ import annotations

import math

import numpy as np

from .chunked import SLAB_ALIGN, _align_up, _slab_extent, fitting_workers, plan_slabs

__all__ = ["slab_local_thickness", "THICKNESS_BYTES_PER_VOXEL"]

#: Working memory of one slab's local thickness, bytes per voxel (distance
#: map, ridge centres, painted output; measured on foams, rounded up).
THICKNESS_BYTES_PER_VOXEL = 40


def _phase_and_distance(volume, seg, spacing, which, lo, hi, roi=None):
    """The phase's planes lo..hi-1 and their distance to its walls.  With an
    ROI (a volume, non-zero inside), the phase is the solid or the space
    inside it and the ROI's outside is no wall, as in memory
    (:func:`skelmorph.measure.bone.bone_measures`)."""
    from .thinning import distance_map_sq
    mask = seg(volume.planes(lo, hi))
    if roi is None:
        phase = mask if which == "solid" else ~mask
        del mask
        d = distance_map_sq(phase, spacing)
    else:
        inside = roi.planes(lo, hi) != 0
        if which == "solid":
            phase, no_wall = mask, mask | ~inside
        else:
            phase, no_wall = inside & ~mask, ~mask
        del mask, inside
        d = distance_map_sq(no_wall, spacing)
        del no_wall
        d[~phase] = 0
    np.sqrt(d, out=d)
    return phase, d


def _band_radius(d, a, b, lo, half):
    """Largest distance on the band (core widened by ``half`` planes)."""
    band = d[max(0, a - half - lo):max(0, b + half - lo)]
    return float(band.max(initial=0.0))


def radius_task(volume, seg, spacing, which, a, b, halo, memory_limit, roi=None):
    """The halo this core needs and the largest exact radius in it:
    ``{"core": (a, b), "halo": H, "radius": R}``, or ``{"need": H}`` when a slab with that
    halo does not fit the memory limit."""
    nz = volume.shape[0]
    sz = float(spacing[0])
    plane_bytes = float(volume.shape[1]) * volume.shape[2] * THICKNESS_BYTES_PER_VOXEL
    while True:
        lo, hi = _slab_extent(a, b, halo, nz)
        _, d = _phase_and_distance(volume, seg, spacing, which, lo, hi, roi)
        whole = lo == 0 and hi == nz
        rho = _band_radius(d, a, b, lo, halo // 2)
        if whole or rho <= (halo // 2 - 1) * sz:
            return {"core": (a, b), "halo": halo,
                    "radius": float(d[a - lo:b - lo].max(initial=0.0))}
        # No wall in reach (infinite distances): twice the halo.
        need = _align_up(2 * (math.ceil(rho / sz) + 2)) if math.isfinite(rho) else 2 * halo
        del d
        if (b - a + 2 * need) * plane_bytes > memory_limit:
            return {"need": need}
        halo = need


def thickness_task(volume, seg, spacing, which, a, b, halo, step, roi=None):
    """Sum, sum of squares and count of the local thickness on a core."""
    from .measure.thickness import bounded_local_thickness, masked_mean_sd
    nz = volume.shape[0]
    lo, hi = _slab_extent(a, b, halo, nz)
    lo -= lo % step  # the coarse lattice of the whole volume
    phase, d = _phase_and_distance(volume, seg, spacing, which, lo, hi, roi)
    local, _ = bounded_local_thickness(phase, d, spacing, step=step, reuse_dist=True)
    del d
    total, total_sq, count = masked_mean_sd(local[a - lo:b - lo], phase[a - lo:b - lo], sums=True)
    return float(total), float(total_sq), int(count)


def slab_local_thickness(volume, seg, spacing, which, memory_limit, *, workers=1,
                         scheduler=None, progress=False, roi=None):
    """Mean and SD of the local thickness of the solid or of the space.

    Parameters
    ----------
    volume : skelmorph.volume.Volume
    seg : skelmorph.chunked.Segmenter
    spacing : sequence of 3 float, physical voxel size
    which : {"solid", "space"}
    memory_limit : int, bytes
        Shared by the local workers (:func:`skelmorph.chunked.fitting_workers`).
    workers, scheduler : as in :func:`skelmorph.engine.execute`
    progress : bool
    roi : skelmorph.volume.Volume, optional
        Region of the same shape (non-zero inside): the phase is taken inside
        it, and its outside is no wall.

    Returns
    -------
    mean, sd : float (NaN without any voxel of the phase)
    step : int, the lattice step (1: exact painting)
    halo : int, the deepest halo used, planes
    """
    from .engine import execute
    from .measure.thickness import MAX_BALL_VOXELS
    from .progress import Progress
    if which not in ("solid", "space"):
        raise ValueError("which must be 'solid' or 'space'")
    sp = tuple(float(s) for s in spacing)
    halo = SLAB_ALIGN * 2
    while True:  # pass 1: halos and the largest radius
        n_run, task_limit = fitting_workers(volume.shape, memory_limit, halo, workers,
                                            scheduler, THICKNESS_BYTES_PER_VOXEL)
        slabs = plan_slabs(volume.shape, task_limit, halo,
                           bytes_per_voxel=THICKNESS_BYTES_PER_VOXEL)
        bar = Progress(len(slabs), f"{which} radii", enabled=bool(progress))
        tasks = [(volume, seg, sp, which, a, b, halo, task_limit, roi) for a, b in slabs]
        found, needs = {}, []
        for out in execute(radius_task, tasks, workers=n_run, scheduler=scheduler,
                           name=f"skelmorph-{which}-radius"):
            bar.update()
            if "need" in out:
                needs.append(out["need"])
            else:
                found[out["core"]] = out
        if not needs:
            break
        halo = max(needs)
    radius = max(r["radius"] for r in found.values())
    step = max(1, int(radius / min(sp) // MAX_BALL_VOXELS))
    tasks = [(volume, seg, sp, which, a, b, found[(a, b)]["halo"], step, roi)
             for a, b in slabs]
    bar = Progress(len(slabs), f"{which} thickness", enabled=bool(progress))
    total = total_sq = 0.0
    count = 0
    for s, s2, n in execute(thickness_task, tasks, workers=n_run, scheduler=scheduler,
                            name=f"skelmorph-{which}-thickness"):
        total, total_sq, count = total + s, total_sq + s2, count + n
        bar.update()
    if count == 0:
        return float("nan"), float("nan"), step, halo
    mean = total / count
    sd = math.sqrt(max(total_sq / count - mean * mean, 0.0))
    return mean, sd, step, max(r["halo"] for r in found.values())
