"""Rooted trees as parent-index arrays.

A :class:`Tree` is the input of the tree descriptors (elder-rule barcodes,
Strahler orders, radial profiles).  It lives at point level: every polyline
point of a skeleton graph is a tree point, so lengths and profiles stay exact.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from .errors import InputError

__all__ = ["Tree"]


@dataclass(frozen=True, eq=False)
class Tree:
    """A rooted tree embedded in space, in physical units.

    Attributes
    ----------
    parent : (n,) int array
        Index of each point's parent; -1 at the root (exactly one).
    coords : (n, d) float array
        Point positions, axis order ``(z, y, x)`` / ``(y, x)``.
    radius : (n,) float array
        Radius at each point (NaN when unknown).
    meta : dict
        How the tree was made (root node, spanning rule, number of cuts...).

    Results never depend on the order of the points.  Build one with
    :meth:`from_parents` or from a graph with :func:`skelmorph.spanning_trees`.
    """

    parent: np.ndarray
    coords: np.ndarray
    radius: np.ndarray
    meta: dict = field(default_factory=dict)

    @classmethod
    def from_parents(cls, parent, coords, radius=None, meta=None):
        """Build a tree from parent indices (-1 at the root), in any node order.

        Raises
        ------
        InputError
            If there is not exactly one root, an index is out of range, the
            parents form a cycle, or coordinates are not finite.
        """
        parent = np.asarray(parent)
        if parent.ndim != 1 or len(parent) == 0:
            raise InputError("parent must be a non-empty 1-D array of indices")
        if not np.issubdtype(parent.dtype, np.integer):
            if not np.all(np.isfinite(parent)) or np.any(parent != np.round(parent)):
                raise InputError("parent indices must be integers")
        parent = parent.astype(np.int64)
        n = len(parent)
        coords = np.asarray(coords, dtype=float)
        if coords.ndim == 1:
            coords = coords[:, None]
        if coords.shape[0] != n:
            raise InputError(f"coords has {coords.shape[0]} rows but parent has {n} entries")
        if not np.all(np.isfinite(coords)):
            raise InputError("coords contain NaN or infinite values")
        if radius is None:
            radius = np.full(n, np.nan)
        radius = np.asarray(radius, dtype=float).reshape(-1)
        if len(radius) != n:
            raise InputError(f"radius has {len(radius)} entries but parent has {n}")
        roots = np.flatnonzero(parent == -1)
        if len(roots) != 1:
            raise InputError(f"a tree needs exactly one root (parent -1); found {len(roots)}")
        bad = (parent < -1) | (parent >= n) | (parent == np.arange(n))
        if bad.any():
            raise InputError(f"parent index out of range or self-parent at point {np.flatnonzero(bad)[0]}")
        tree = cls(parent, coords, radius, dict(meta or {}))
        if len(tree.order) != n:
            raise InputError(f"parent indices contain a cycle: only {len(tree.order)} of {n} "
                             "points are reachable from the root")
        return tree

    # ------------------------------------------------------------ structure
    @property
    def n_points(self):
        return len(self.parent)

    @property
    def ndim(self):
        return self.coords.shape[1]

    @cached_property
    def root(self):
        return int(np.flatnonzero(self.parent == -1)[0])

    @cached_property
    def n_children(self):
        p = self.parent[self.parent >= 0]
        return np.bincount(p, minlength=self.n_points)

    @cached_property
    def order(self):
        """Breadth-first point order from the root: every parent precedes its children."""
        from ._kernels import bfs_order
        has_parent = self.parent >= 0
        children = np.flatnonzero(has_parent)
        by_parent = children[np.argsort(self.parent[children], kind="stable")]
        start = np.concatenate([[0], np.cumsum(self.n_children)])
        return bfs_order(self.root, start, by_parent)

    @cached_property
    def tips(self):
        """Indices of the terminal points (no children; never the root)."""
        t = self.n_children == 0
        t[self.root] = False
        return np.flatnonzero(t)

    @cached_property
    def branch_points(self):
        """Indices of the points with two or more children."""
        return np.flatnonzero(self.n_children >= 2)

    @cached_property
    def is_critical(self):
        """Root, tips and branch points (where branches start and end)."""
        c = self.n_children != 1
        c[self.root] = True
        return c

    @cached_property
    def segment_length(self):
        """Length of the segment from each point to its parent (0 at the root)."""
        p = np.where(self.parent >= 0, self.parent, np.arange(self.n_points))
        return np.linalg.norm(self.coords - self.coords[p], axis=1)

    @cached_property
    def path_distance(self):
        """Distance from the root along the tree, in the coordinates' unit."""
        from ._kernels import accumulate_down
        return accumulate_down(self.order, self.parent, self.segment_length)

    @property
    def radial_distance(self):
        """Straight-line distance from the root."""
        return np.linalg.norm(self.coords - self.coords[self.root], axis=1)

    @property
    def total_length(self):
        return float(self.segment_length.sum())

    # ------------------------------------------------------------ branches
    @cached_property
    def branch_top(self):
        """Nearest critical strict ancestor of every point (-1 at the root)."""
        from ._kernels import branch_tops
        return branch_tops(self.order, self.parent, self.is_critical)

    def branches(self):
        """Branches between consecutive critical points.

        Returns
        -------
        dict of arrays
            ``start`` (upper critical point), ``end`` (lower critical point),
            ``length`` (along the tree) and ``chord`` (straight line).
        """
        end = np.flatnonzero(self.is_critical)
        end = end[end != self.root]
        start = self.branch_top[end]
        d = self.path_distance
        return {
            "start": start,
            "end": end,
            "length": d[end] - d[start],
            "chord": np.linalg.norm(self.coords[end] - self.coords[start], axis=1),
        }

    def __repr__(self):
        return (f"Tree(n_points={self.n_points}, tips={len(self.tips)}, "
                f"branch_points={len(self.branch_points)}, length={self.total_length:.4g})")
