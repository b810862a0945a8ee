"""Topology of centreline voxels: neighbour links without staircase
redundancy, tiny voxel cycles, and the Euler characteristic of a voxel set
as a union of closed cubes (used by the graph builder's loop check)."""

from __future__ import annotations

import itertools

import numpy as np

from ._kernels import count_distinct_shifted, cyclic_block_voxels, sorted_positions
from .grid import c_strides, forward_offsets

__all__ = ["voxel_links", "small_cycle_voxels", "euler_characteristic"]


def _intermediates(off):
    """Offsets w (0 < w < off componentwise) through which a link ``off`` is redundant."""
    nz = np.flatnonzero(off)
    out = []
    for r in range(1, len(nz)):
        for sub in itertools.combinations(nz, r):
            w = np.zeros_like(off)
            w[list(sub)] = off[list(sub)]
            out.append(w)
    return out


def voxel_links(coords, shape):
    """Non-redundant neighbour links between centreline voxels.

    Parameters
    ----------
    coords : (n, d) int array
        Voxel indices, sorted in C order (as ``np.nonzero`` returns them).
    shape : tuple

    Returns
    -------
    (m, 2) int array of voxel index pairs ``i < j``.
    """
    ndim = coords.shape[1]
    pshape = np.asarray(shape, dtype=np.int64) + 2  # padding: no wrap-around at the edges
    strides = c_strides(pshape)
    lin = (coords.astype(np.int64) + 1) @ strides
    # Neighbours found by merging sorted indices (linear, and no array of the
    # image's size): the voxels are in C order, so lin + offset is sorted too.
    pairs = []
    for off in forward_offsets(ndim):
        off_lin = int(off @ strides)
        where = sorted_positions(lin, lin + off_lin)
        i = np.flatnonzero(where >= 0)
        if np.abs(off).sum() >= 2 and len(i):
            redundant = np.zeros(len(i), bool)
            for w in _intermediates(off):
                redundant |= sorted_positions(lin, lin[i] + int(w @ strides)) >= 0
            i = i[~redundant]
        pairs.append(np.column_stack([i, where[i]]))
    return np.concatenate(pairs) if pairs else np.zeros((0, 2), np.int64)


def small_cycle_voxels(coords, links, shape):
    """Voxels of 2x2(x2) blocks whose links close a cycle.

    All voxels of a 2x2x2 block are mutually 26-adjacent, so a cycle inside
    one block encloses no background: it is not a loop of the structure.
    Such voxels are made part of a junction node, where the cycle collapses.
    A block holds a cycle when its links are at least as many as its voxels
    (at least three).  Counted per block by a numba kernel that touches only
    the blocks of centreline voxels (a 2D image is a one-slice volume).
    """
    n, ndim = coords.shape
    if n == 0 or len(links) == 0:
        return np.zeros(n, bool)
    base = coords.astype(np.int64) + 1
    shape = tuple(shape)
    if ndim == 2:
        base = np.column_stack([np.ones(n, np.int64), base])
        shape = (1,) + shape
    bshape = np.asarray(shape, np.int64) + 1
    return cyclic_block_voxels(base, np.ascontiguousarray(links, np.int64), bshape)


def euler_characteristic(coords, shape, labels=None):
    """Euler characteristic of a sparse voxel set, 26- (3D) or 8- (2D) connected.

    With full connectivity the set is the union of closed unit cubes, a
    cubical complex, so chi = sum over k of (-1)^k x (number of k-cells),
    a k-cell being a lattice point plus k axis directions.  Each voxel
    contributes the 3**d cells of its closed cube.  Matches
    ``skimage.measure.euler_number(mask, connectivity=ndim)`` (tested).

    Parameters
    ----------
    coords : (n, d) int array of voxel indices
    shape : tuple, the array shape
    labels : (n,) int array, optional
        Labels of non-adjacent voxel groups (e.g. junction clusters): then the
        Euler characteristic of every group is returned, as an array indexed
        by label.  Distinct cells are counted with ``np.unique`` here, and by
        merging sorted runs (no sort, no lattice array) for the whole set.

    Returns
    -------
    int, or int array when ``labels`` is given
    """
    coords = np.asarray(coords, np.int64)
    if len(coords) == 0:
        return 0 if labels is None else np.zeros(0, np.int64)
    ndim = coords.shape[1]
    lattice = np.asarray(shape, np.int64) + 1  # cube corners run 0..shape
    strides = c_strides(lattice)
    base = coords @ strides
    if labels is None and len(base) > 1 and np.any(np.diff(base) <= 0):
        base = np.unique(base)  # the merge needs the voxels in C order, once each
    if labels is not None:
        chi_of = np.zeros(int(labels.max()) + 1, np.int64)
    chi = 0
    for k in range(ndim + 1):
        for along in itertools.combinations(range(ndim), k):
            across = [a for a in range(ndim) if a not in along]
            # Cells spanning `along` at the cube's corners offset across the rest.
            shifts = [int(sum(c * strides[a] for c, a in zip(corner, across)))
                      for corner in itertools.product((0, 1), repeat=len(across))]
            if labels is None:  # distinct cells by merging sorted runs (no lattice array)
                chi += (-1) ** k * int(count_distinct_shifted(base, np.array(shifts, np.int64)))
            else:
                cells = (base[:, None] + np.array(shifts)[None]).ravel()
                _, first = np.unique(cells, return_index=True)
                owner = np.repeat(labels, len(shifts))[first]
                chi_of += (-1) ** k * np.bincount(owner, minlength=len(chi_of))
    return chi if labels is None else chi_of
