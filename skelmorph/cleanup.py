"""Clean-up passes on the raw graph, repeated until stable: contract short
branches between close junctions, prune spurs, dissolve degree-two nodes,
extend tips, drop voxel loops the mask does not have; then smooth and
measure (``finish``)."""

from __future__ import annotations


import numpy as np

from ._kernels import kruskal
from .graph import SkeletonGraph
from .polyline import polyline_lengths, smooth_polylines
from .radius import equivalent_radius

from .rawgraph import _components


#: Longest branch (in voxels of the coarsest axis) that junction merging contracts.
MERGE_MAX_VOXELS = 3.0


def _merge_close_junctions(w):
    """Contract short edges between two junctions closer than the sum of their radii.

    Contracting an edge keeps E - V + C, so loops are never created or lost.
    """
    deg = w.degree()
    u, v = np.asarray(w.u, np.int64), np.asarray(w.v, np.int64)
    if len(u) == 0:
        return False
    dist = np.linalg.norm(w.node_pos[u] - w.node_pos[v], axis=1)
    # Close: within the sum of the radii, joined by a branch no longer than
    # the thicker junction's radius nor MERGE_MAX_VOXELS voxels.  Contraction
    # joins the merged node's branches by straight segments of up to that
    # length, so the cap keeps them within voxel noise of the centreline:
    # thick structures (radius large against their mesh) keep their branches.
    reach = np.minimum(np.maximum(w.node_r[u], w.node_r[v]), MERGE_MAX_VOXELS * max(w.spacing))
    close = ((u != v) & (deg[u] >= 3) & (deg[v] >= 3) & (dist < w.node_r[u] + w.node_r[v])
             & (w.raw_lengths() <= reach))
    if not close.any():
        return False
    n = len(w.node_pos)
    # Contract a spanning forest of the close edges only; the others close a
    # loop and stay, as self-loops of the merged node.
    close = kruskal(n, u.astype(np.int64), v.astype(np.int64), np.flatnonzero(close))
    _, group = _components(n, np.column_stack([u[close], v[close]]))
    # Representative of each group: its member with the largest radius.
    order = np.lexsort((-w.node_r, group))
    rep_of_group = np.full(group.max() + 1, -1)
    firsts = np.unique(group[order], return_index=True)[1]
    rep_of_group[group[order][firsts]] = order[firsts]
    rep = rep_of_group[group]
    keep = np.flatnonzero(~close)
    new_u, new_v = rep[u[keep]], rep[v[keep]]
    pts, rad = w.pts.take(keep), w.rad.take(keep)
    moved = np.flatnonzero((new_u != u[keep]) | (new_v != v[keep]))
    for i in moved.tolist():  # only the branches whose end node was merged away
        a, b = new_u[i], new_v[i]
        p, r = pts[i].copy(), rad[i].copy()
        p[0], p[-1] = w.node_pos[a], w.node_pos[b]
        r[0], r[-1] = w.node_r[a], w.node_r[b]
        pts[i], rad[i] = p, r
    w.u, w.v, w.pts, w.rad = list(new_u), list(new_v), pts, rad
    return True


def _prune_spurs(w, factor, min_length):
    """Remove terminal edges shorter than max(factor x junction radius, min_length).

    A tip on the image border is a cut through the structure, not a spur, and
    is kept.  Only edges from a tip to a junction (degree >= 3) are candidates, so
    pruning never breaks a loop or disconnects a component; when every edge
    of a junction is a candidate the longest one stays.
    """
    deg = w.degree()
    u, v = np.asarray(w.u, np.int64), np.asarray(w.v, np.int64)
    if len(u) == 0:
        return False
    length = w.raw_lengths()
    tip_u, tip_v = deg[u] == 1, deg[v] == 1
    junction = np.where(tip_u, v, u)
    terminal = (tip_u ^ tip_v) & (deg[junction] >= 3)
    limit = np.maximum(factor * w.node_r[junction], min_length)
    cand = terminal & (length <= limit) & ~w.near_border(np.where(tip_u, u, v))
    if not cand.any():
        return False
    # A junction whose every edge is a candidate keeps its longest one.
    n_cand = np.bincount(junction[cand], minlength=len(deg))
    full = np.flatnonzero((n_cand >= deg) & (n_cand > 0))
    for j in full:  # rare: star-shaped remnants
        idx = np.flatnonzero(cand & (junction == j))
        cand[idx[np.argmax(length[idx])]] = False
    w.keep_edges(np.flatnonzero(~cand))
    return True


def _dissolve_degree_two(w):
    """Join the two edges at every node of degree 2 (except ring anchors)."""
    deg = w.degree()
    cand = np.flatnonzero(deg == 2)
    if len(cand) == 0:
        return False
    incident = {int(c): [] for c in cand}
    for e, (a, b) in enumerate(zip(w.u, w.v)):
        if a in incident:
            incident[a].append(e)
        if b in incident and b != a:
            incident[b].append(e)
    alive = [True] * len(w.u)
    changed = False
    for node in cand:  # nodes that pruning or merging left with two edges
        node = int(node)
        es = [e for e in incident[node] if alive[e]]
        if len(es) != 2:
            continue  # a ring anchor (one self-loop) or already handled
        e1, e2 = es
        p1, r1 = (w.pts[e1], w.rad[e1]) if w.v[e1] == node else (w.pts[e1][::-1], w.rad[e1][::-1])
        a = w.u[e1] if w.v[e1] == node else w.v[e1]
        p2, r2 = (w.pts[e2], w.rad[e2]) if w.u[e2] == node else (w.pts[e2][::-1], w.rad[e2][::-1])
        b = w.v[e2] if w.u[e2] == node else w.u[e2]
        alive[e1] = alive[e2] = False
        w.u.append(a)
        w.v.append(b)
        w.pts.append(np.concatenate([p1, p2[1:]]))
        w.rad.append(np.concatenate([r1, r2[1:]]))
        alive.append(True)
        new = len(w.u) - 1
        for end in (a, b):
            if end in incident:
                incident[end] = [new if x in (e1, e2) else x for x in incident[end]]
                if a == b and end == a:
                    incident[end] = list(dict.fromkeys(incident[end]))
        changed = True
    w.keep_edges([e for e in range(len(w.u)) if alive[e]])
    return changed


def _extend_tips(w):
    """Lengthen every terminal edge by its tip radius along its end direction.

    Thinning stops about one radius short of the object's end.
    """
    deg = w.degree()
    for e in range(len(w.u)):
        p = w.pts[e]
        if len(p) < 2 or w.u[e] == w.v[e]:
            continue
        for end in (0, 1):
            node = w.v[e] if end else w.u[e]
            if deg[node] != 1:
                continue
            seq = p if end else p[::-1]
            k = min(3, len(seq) - 1)
            direction = seq[-1] - seq[-1 - k]
            norm = np.linalg.norm(direction)
            if norm == 0:
                continue
            tip = seq[-1] + direction / norm * w.node_r[node]
            w.node_pos[node] = tip
            if end:
                p = np.vstack([p, tip])
                w.rad[e] = np.append(w.rad[e], w.node_r[node])
            else:
                p = np.vstack([tip, p])
                w.rad[e] = np.insert(w.rad[e], 0, w.node_r[node])
        w.pts[e] = p


def _drop_spurious_loops(w, euler, cavities):
    """Remove the loops the voxel graph has beyond the skeleton's true count.

    Thinning preserves the Euler characteristic chi = b0 - b1 + b2, so the
    number of independent loops is components + cavities - chi
    (``cavities`` is called only when the graph has too many loops).  A
    few voxel configurations around thick junctions still close tiny cycles
    in the graph that enclose no background; the excess is removed as the
    shortest edges that lie on a short cycle.
    """
    n = len(w.node_pos)
    u, v = np.asarray(w.u, np.int64), np.asarray(w.v, np.int64)
    if len(u) == 0:
        return 0
    ncomp, _ = _components(n, np.column_stack([u, v]))
    excess = (len(u) - n + ncomp) - (ncomp - euler)
    if excess > 0:
        excess -= cavities()
    if excess <= 0:
        return 0
    length = w.raw_lengths()
    adj = {}
    for e, (a, b) in enumerate(zip(u.tolist(), v.tolist())):
        adj.setdefault(a, set()).add(e)
        adj.setdefault(b, set()).add(e)

    def on_short_cycle(e, hops=4):
        """Is there another path from u[e] to v[e] within ``hops`` edges?"""
        a, b = int(u[e]), int(v[e])
        if a == b:
            return True
        frontier, seen = {a}, {a}
        for _ in range(hops):
            nxt = set()
            for x in frontier:
                for f in adj[x]:
                    if f == e:
                        continue
                    y = int(v[f]) if int(u[f]) == x else int(u[f])
                    if y == b:
                        return True
                    if y not in seen:
                        seen.add(y)
                        nxt.add(y)
            frontier = nxt
        return False

    # Candidates: edges shorter than the circumference at their ends (a loop
    # that short cannot go round a hole of the structure; common practice).
    cand = np.flatnonzero(length <= 2 * np.pi * np.maximum(w.node_r[u], w.node_r[v]))
    drop = []
    for e in cand[np.argsort(length[cand], kind="stable")]:  # shortest first
        if len(drop) == excess:
            break
        if on_short_cycle(e):
            drop.append(e)
            adj[int(u[e])].discard(e)
            adj[int(v[e])].discard(e)
    w.keep_edges(np.setdiff1d(np.arange(len(u)), drop))
    return len(drop)


def _finish(w, spacing, unit, shape, smoothing, meta, mask=None, volumes=None):
    """Drop nodes left without edges, flatten polylines, smooth them, measure lengths."""
    alive = (w.degree() > 0) | w.protected
    new_id = np.cumsum(alive) - 1
    u = new_id[np.asarray(w.u, np.int64)] if w.u else np.zeros(0, np.int64)
    v = new_id[np.asarray(w.v, np.int64)] if w.v else np.zeros(0, np.int64)
    nodes = w.node_pos[alive]
    node_r = w.node_r[alive]
    ndim = len(spacing)
    offsets = np.concatenate([[0], np.cumsum(w.pts.lengths())]).astype(np.int64)
    points = w.pts.concatenate(np.zeros((0, ndim)))
    radius = w.rad.concatenate(np.zeros(0))
    w.pts = w.rad = None  # the flat copies replace the per-edge arrays (w ends here)
    edges = np.column_stack([u, v]).astype(np.int64) if len(u) else np.zeros((0, 2), np.int64)
    degree = np.bincount(edges.ravel(), minlength=len(nodes)).astype(np.int64)
    # A ring anchor (one self-loop, nothing else) smooths as a closed curve.
    closed = (u == v) & (degree[u] == 2) if len(u) else np.zeros(0, bool)
    # Smoothing works in points, i.e. about voxels of the finest axis.
    raw_points = points
    points = smooth_polylines(points, offsets, smoothing, closed=closed)
    edge_radius = None
    if mask is not None or volumes is not None:
        # Leave out twice the node radius at junctions (where daughters still
        # overlap each other and the parent), once at tips.
        reach = node_r * np.where(degree >= 3, 2.0, 1.0)
        edge_radius = equivalent_radius(mask, spacing, raw_points, points, offsets,
                                        np.column_stack([reach[u], reach[v]]) if len(u)
                                        else np.zeros((0, 2)), volumes=volumes)
    if closed.any():
        nodes = nodes.copy()
        nodes[u[closed]] = points[offsets[:-1][closed]]
    length = polyline_lengths(points, offsets)
    return SkeletonGraph(nodes=nodes, node_radius=node_r, node_degree=degree, edges=edges,
                         points=points, point_radius=radius, offsets=offsets, edge_length=length,
                         spacing=tuple(spacing), unit=unit, shape=tuple(shape), meta=meta,
                         edge_radius=edge_radius)
