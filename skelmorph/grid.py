"""Small helpers for flat indexing of voxel grids, shared by the graph
builder and the thickness measures."""

from __future__ import annotations

import itertools

import numpy as np

__all__ = ["neighbour_offsets", "forward_offsets", "c_strides"]


def neighbour_offsets(ndim):
    """The 3**d - 1 offsets of the full (8- or 26-) neighbourhood, (k, d) int array.

    >>> len(neighbour_offsets(2)), len(neighbour_offsets(3))
    (8, 26)
    """
    return np.array([o for o in itertools.product((-1, 0, 1), repeat=ndim) if any(o)])


def forward_offsets(ndim):
    """Half of :func:`neighbour_offsets`, those whose first non-zero entry is
    positive (the other half are their negatives), so that each neighbour
    pair is visited once.

    >>> forward_offsets(2).tolist()
    [[0, 1], [1, -1], [1, 0], [1, 1]]
    """
    offs = neighbour_offsets(ndim)
    first = offs[np.arange(len(offs)), np.argmax(offs != 0, axis=1)]
    return offs[first > 0]


def c_strides(shape):
    """Element strides of a C-ordered array of ``shape`` (int64), so that
    ``index @ c_strides(shape)`` is the flat index.

    >>> c_strides((4, 5, 6)).tolist()
    [30, 6, 1]
    """
    shape = np.asarray(shape, np.int64)
    strides = np.ones(len(shape), np.int64)
    for a in range(len(shape) - 2, -1, -1):
        strides[a] = strides[a + 1] * shape[a + 1]
    return strides
