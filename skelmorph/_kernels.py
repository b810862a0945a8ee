"""Compiled kernels for work that is sequential by nature.

Tree sweeps (a parent needs all its children first), loop-erased random walks
and union-find are inherently sequential, so they are written as plain loops
and compiled with numba.  Everything else in skelmorph stays vectorised numpy.
This module is imported only by the modules that need it, so ``import
skelmorph`` does not pay for the compiler.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["bfs_order", "accumulate_down", "accumulate_max_down", "elder_rule", "strahler_orders",
           "branch_tops", "wilson_tree", "kruskal", "walk_chains", "count_walk_paths"]


@njit(cache=True)
def bfs_order(root, child_start, child_index):
    """Breadth-first order from ``root`` over a children CSR; parents come first."""
    n = len(child_start) - 1
    order = np.empty(n, np.int64)
    order[0] = root
    head = 0
    tail = 1
    while head < tail:
        v = order[head]
        head += 1
        for k in range(child_start[v], child_start[v + 1]):
            order[tail] = child_index[k]
            tail += 1
    return order[:tail]


@njit(cache=True)
def accumulate_down(order, parent, step):
    """value[v] = value[parent[v]] + step[v] along ``order`` (root value 0)."""
    out = np.zeros(len(parent))
    for i in range(1, len(order)):
        v = order[i]
        out[v] = out[parent[v]] + step[v]
    return out


@njit(cache=True)
def elder_rule(order, parent, f, rank):
    """Elder-rule pairing on a rooted tree.

    Sweeps children before parents.  Every point carries the leaf whose bar
    it continues; where two carried bars meet at point p, the one with the
    lower ``rank`` (the younger) ends with (f[leaf], f[p]).  The survivor ends
    at the root.  ``rank`` orders leaves by value, ties broken by the caller.
    """
    n = len(parent)
    carry = np.full(n, -1, np.int64)
    births = np.empty(n)
    deaths = np.empty(n)
    leaf = np.empty(n, np.int64)
    nb = 0
    for i in range(len(order) - 1, 0, -1):
        v = order[i]
        if carry[v] < 0:
            carry[v] = v
        c = carry[v]
        p = parent[v]
        q = carry[p]
        if q < 0:
            carry[p] = c
        else:
            if rank[c] > rank[q]:
                loser = q
                carry[p] = c
            else:
                loser = c
            births[nb] = f[loser]
            deaths[nb] = f[p]
            leaf[nb] = loser
            nb += 1
    root = order[0]
    if carry[root] >= 0:
        births[nb] = f[carry[root]]
        deaths[nb] = f[root]
        leaf[nb] = carry[root]
        nb += 1
    return births[:nb], deaths[:nb], leaf[:nb]


@njit(cache=True)
def strahler_orders(order, parent):
    """Strahler order of every point: leaves 1; two equal top child orders add one."""
    n = len(parent)
    best1 = np.zeros(n, np.int64)
    best2 = np.zeros(n, np.int64)
    out = np.zeros(n, np.int64)
    for i in range(len(order) - 1, -1, -1):
        v = order[i]
        if best1[v] == 0:
            out[v] = 1
        elif best2[v] == best1[v]:
            out[v] = best1[v] + 1
        else:
            out[v] = best1[v]
        if i > 0:
            p = parent[v]
            o = out[v]
            if o > best1[p]:
                best2[p] = best1[p]
                best1[p] = o
            elif o > best2[p]:
                best2[p] = o
    return out


@njit(cache=True)
def branch_tops(order, parent, critical):
    """For every non-root point, the nearest critical strict ancestor."""
    top = np.full(len(parent), -1, np.int64)
    for i in range(1, len(order)):
        v = order[i]
        p = parent[v]
        top[v] = p if critical[p] else top[p]
    return top


@njit(cache=True)
def wilson_tree(n, adj_start, adj_node, adj_edge, root, in_comp, seed):
    """Uniform spanning tree by loop-erased random walks (Wilson 1996).

    Returns, for every node of the component, the edge to its parent
    (-1 at the root and outside the component).  Each step picks one incident
    edge uniformly, so parallel edges count as distinct edges.
    """
    np.random.seed(seed)
    in_tree = np.zeros(n, np.bool_)
    next_node = np.full(n, -1, np.int64)
    next_edge = np.full(n, -1, np.int64)
    in_tree[root] = True
    for start in range(n):
        if not in_comp[start] or in_tree[start]:
            continue
        u = start
        while not in_tree[u]:
            deg = adj_start[u + 1] - adj_start[u]
            k = adj_start[u] + np.random.randint(0, deg)
            next_node[u] = adj_node[k]
            next_edge[u] = adj_edge[k]
            u = adj_node[k]
        u = start
        while not in_tree[u]:
            in_tree[u] = True
            u = next_node[u]
    parent_edge = np.full(n, -1, np.int64)
    for v in range(n):
        if in_comp[v] and v != root:
            parent_edge[v] = next_edge[v]
    return parent_edge


@njit(cache=True)
def kruskal(n, u, v, sorted_edges):
    """Kruskal's spanning forest: scan edges in the given order, keep those joining two trees."""
    root = np.arange(n)
    keep = np.zeros(len(u), np.bool_)
    for e in sorted_edges:
        a = u[e]
        while root[a] != a:
            root[a] = root[root[a]]
            a = root[a]
        b = v[e]
        while root[b] != b:
            root[b] = root[root[b]]
            b = root[b]
        if a != b:
            root[a] = b
            keep[e] = True
    return keep


@njit(cache=True)
def accumulate_max_down(order, parent, value):
    """out[v] = max(out[parent[v]], value[v]) along ``order`` (root keeps its value)."""
    out = value.copy()
    for i in range(1, len(order)):
        v = order[i]
        p = parent[v]
        if out[p] > out[v]:
            out[v] = out[p]
    return out


@njit(cache=True)
def walk_chains(adj_start, adj_nbr, adj_seg, critical, seg_len, seg_a):
    """Split a segment graph into chains between critical points.

    Walks from every critical point along each unvisited incident segment
    through points of degree two until the next critical point.  For each
    segment and each of its ends k (0 = ``seg_a`` side), ``anchor[s, k]`` is
    the critical point the chain starts from when walking in through end k,
    and ``arc[s, k]`` the length walked before reaching the segment.
    """
    m = len(seg_len)
    anchor = np.full((m, 2), -1, np.int64)
    arc = np.zeros((m, 2))
    chain = np.full(m, -1, np.int64)
    c_len = np.zeros(m)
    c_start = np.full(m, -1, np.int64)
    c_end = np.full(m, -1, np.int64)
    buf_seg = np.empty(m, np.int64)
    buf_side = np.empty(m, np.int64)
    buf_arc = np.empty(m)
    nc = 0
    n = len(adj_start) - 1
    for p in range(n):
        if not critical[p]:
            continue
        for k in range(adj_start[p], adj_start[p + 1]):
            s = adj_seg[k]
            if chain[s] >= 0:
                continue
            cnt = 0
            walked = 0.0
            x = p
            cur = s
            nxt = adj_nbr[k]
            while True:
                side = 0 if seg_a[cur] == x else 1
                chain[cur] = nc
                buf_seg[cnt] = cur
                buf_side[cnt] = side
                buf_arc[cnt] = walked
                cnt += 1
                walked += seg_len[cur]
                x = nxt
                if critical[x]:
                    break
                nxt_seg = -1
                for kk in range(adj_start[x], adj_start[x + 1]):
                    if adj_seg[kk] != cur:
                        nxt_seg = adj_seg[kk]
                        nxt = adj_nbr[kk]
                        break
                if nxt_seg < 0 or chain[nxt_seg] >= 0:
                    break
                cur = nxt_seg
            for i in range(cnt):
                si = buf_seg[i]
                sd = buf_side[i]
                anchor[si, sd] = p
                arc[si, sd] = buf_arc[i]
                anchor[si, 1 - sd] = x
                arc[si, 1 - sd] = walked - buf_arc[i] - seg_len[si]
            c_len[nc] = walked
            c_start[nc] = p
            c_end[nc] = x
            nc += 1
    return anchor, arc, chain, c_len[:nc], c_start[:nc], c_end[:nc]


@njit(cache=True)
def count_walk_paths(adj_start, adj_nbr, k):
    """Simple paths with 1..k edges counted from each start (so each path twice).

    Depth-first search with an on-path flag per vertex; every adjacency entry
    is a distinct edge, so parallel edges give distinct paths.
    """
    n = len(adj_start) - 1
    counts = np.zeros(k + 1, np.int64)
    on_path = np.zeros(n, np.bool_)
    stack_v = np.empty(k + 1, np.int64)
    stack_i = np.empty(k + 1, np.int64)
    for s in range(n):
        depth = 0
        stack_v[0] = s
        stack_i[0] = adj_start[s]
        on_path[s] = True
        while depth >= 0:
            v = stack_v[depth]
            i = stack_i[depth]
            if depth < k and i < adj_start[v + 1]:
                stack_i[depth] = i + 1
                w = adj_nbr[i]
                if not on_path[w]:
                    depth += 1
                    counts[depth] += 1
                    stack_v[depth] = w
                    stack_i[depth] = adj_start[w]
                    on_path[w] = True
            else:
                on_path[v] = False
                depth -= 1
    return counts


@njit(cache=True)
def walk_paths(n, link_start, link_nbr, starts):
    """Voxels of each chain in walking order, chains in the order of ``starts``.

    ``link_start``/``link_nbr`` is the CSR adjacency of path voxels (each has
    at most two path neighbours); each start is one end of its chain.  Linear
    in the number of voxels (a depth-first order from one virtual source
    over every chain costs more as the chains multiply).
    """
    order = np.empty(n, np.int64)
    seen = np.zeros(n, np.bool_)
    k = 0
    for s in starts:
        prev = -1
        cur = s
        while cur >= 0 and not seen[cur]:
            seen[cur] = True
            order[k] = cur
            k += 1
            nxt = -1
            for j in range(link_start[cur], link_start[cur + 1]):
                q = link_nbr[j]
                if q != prev and not seen[q]:
                    nxt = q
                    break
            prev = cur
            cur = nxt
    return order[:k]


@njit(cache=True)
def branch_voxel_paths(order, bounds, first_att, last_att, pred):
    """Voxels of every branch from node voxel to node voxel.

    Branch ``e`` is ``order[bounds[e]:bounds[e + 1]]`` (its path voxels);
    ``first_att[e]``/``last_att[e]`` are the node voxels it touches at each
    end.  Inside a junction cluster the path continues through the cluster's
    voxels to the node's own voxel, following ``pred`` (shortest-path
    predecessors towards it, negative at the node voxel).  Returns the flat
    voxel indices and per-branch offsets.
    """
    n_b = bounds.size - 1
    counts = np.zeros(n_b, np.int64)
    for e in range(n_b):
        c = bounds[e + 1] - bounds[e]
        for a in (first_att[e], last_att[e]):
            x = a
            c += 1
            while pred[x] >= 0:
                x = pred[x]
                c += 1
        counts[e] = c
    offs = np.zeros(n_b + 1, np.int64)
    for e in range(n_b):
        offs[e + 1] = offs[e] + counts[e]
    out = np.empty(offs[n_b], np.int64)
    for e in range(n_b):
        # Prefix: node voxel ... first attachment (walk backwards, then reverse).
        k = offs[e]
        x = first_att[e]
        m = 1
        while pred[x] >= 0:
            x = pred[x]
            m += 1
        x = first_att[e]
        for j in range(m - 1, -1, -1):
            out[k + j] = x
            if pred[x] >= 0:
                x = pred[x]
        k += m
        for i in range(bounds[e], bounds[e + 1]):
            out[k] = order[i]
            k += 1
        x = last_att[e]
        out[k] = x
        k += 1
        while pred[x] >= 0:
            x = pred[x]
            out[k] = x
            k += 1
    return out, offs


@njit(cache=True)
def cyclic_block_voxels(base, links, bshape):
    """Voxels of 2x2x2 blocks whose links close a cycle (links >= voxels >= 3).

    ``base`` holds padded (z, y, x) voxel coordinates (>= 1), ``bshape`` the
    shape of the grid of block origins; counts are kept in dense uint8 grids,
    touched only at the blocks of centreline voxels.
    """
    n = base.shape[0]
    by, bx = bshape[1], bshape[2]
    count = np.zeros(bshape[0] * by * bx, np.uint8)
    lcount = np.zeros(bshape[0] * by * bx, np.uint8)
    for i in range(n):
        for c in range(8):
            k = ((base[i, 0] - (c >> 2)) * by + base[i, 1] - ((c >> 1) & 1)) * bx \
                + base[i, 2] - (c & 1)
            count[k] += 1
    for e in range(links.shape[0]):
        a, b = links[e, 0], links[e, 1]
        for c in range(8):
            o0 = max(base[a, 0], base[b, 0]) - (c >> 2)
            o1 = max(base[a, 1], base[b, 1]) - ((c >> 1) & 1)
            o2 = max(base[a, 2], base[b, 2]) - (c & 1)
            if o0 <= min(base[a, 0], base[b, 0]) and o1 <= min(base[a, 1], base[b, 1]) \
                    and o2 <= min(base[a, 2], base[b, 2]):
                k = (o0 * by + o1) * bx + o2
                if count[k] >= 3:
                    lcount[k] += 1
    flagged = np.zeros(n, np.bool_)
    for i in range(n):
        for c in range(8):
            k = ((base[i, 0] - (c >> 2)) * by + base[i, 1] - ((c >> 1) & 1)) * bx \
                + base[i, 2] - (c & 1)
            if count[k] >= 3 and lcount[k] >= count[k]:
                flagged[i] = True
    return flagged


@njit(cache=True)
def merged_signed_l1(pa, wa, pb, wb):
    """Mean over rows of the integral of |F_a - F_b|, where F_a (F_b) is the
    running sum of weights wa (wb) at the sorted positions pa (pb) of the
    row: one linear merge of the two sorted runs per row."""
    rows = pa.shape[0]
    na, nb = pa.shape[1], pb.shape[1]
    total = 0.0
    for r in range(rows):
        i = 0
        j = 0
        f = 0.0
        x_prev = 0.0
        first = True
        acc = 0.0
        while i < na or j < nb:
            if j >= nb or (i < na and pa[r, i] <= pb[r, j]):
                x = pa[r, i]
                step = wa[r, i]
                i += 1
            else:
                x = pb[r, j]
                step = -wb[r, j]
                j += 1
            if not first:
                acc += abs(f) * (x - x_prev)
            first = False
            f += step
            x_prev = x
        total += acc
    return total / rows if rows else 0.0


@njit(cache=True)
def mesh_areas(verts, normals, faces, eps):
    """Area of a triangle mesh, and of the same mesh with every vertex moved
    by +eps and -eps along its normal: one pass, float64, no temporaries."""
    out = np.zeros(3)
    for f in range(faces.shape[0]):
        i, j, k = faces[f, 0], faces[f, 1], faces[f, 2]
        for s in range(3):
            d = 0.0 if s == 0 else (eps if s == 1 else -eps)
            ax = verts[j, 0] + d * normals[j, 0] - verts[i, 0] - d * normals[i, 0]
            ay = verts[j, 1] + d * normals[j, 1] - verts[i, 1] - d * normals[i, 1]
            az = verts[j, 2] + d * normals[j, 2] - verts[i, 2] - d * normals[i, 2]
            bx = verts[k, 0] + d * normals[k, 0] - verts[i, 0] - d * normals[i, 0]
            by = verts[k, 1] + d * normals[k, 1] - verts[i, 1] - d * normals[i, 1]
            bz = verts[k, 2] + d * normals[k, 2] - verts[i, 2] - d * normals[i, 2]
            cx = ay * bz - az * by
            cy = az * bx - ax * bz
            cz = ax * by - ay * bx
            out[s] += 0.5 * np.sqrt(cx * cx + cy * cy + cz * cz)
            if eps == 0.0:
                break
    return out


@njit(cache=True)
def branch_end_of_points(order, parent, critical):
    """For every point, the critical point that ends its branch (the first
    critical point at or below it); critical points end their own branch."""
    out = np.full(len(parent), -1, np.int64)
    for k in range(len(order) - 1, -1, -1):  # children before parents
        p = order[k]
        if critical[p]:
            out[p] = p
        q = parent[p]
        if q >= 0 and not critical[q]:
            out[q] = out[p]
    return out


@njit(cache=True)
def sorted_positions(values, targets):
    """Index of each target in the strictly increasing ``values``, or -1.

    ``targets`` must be non-decreasing: one linear merge, no search.
    """
    out = np.full(targets.size, -1, np.int64)
    j = 0
    n = values.size
    for i in range(targets.size):
        t = targets[i]
        while j < n and values[j] < t:
            j += 1
        if j < n and values[j] == t:
            out[i] = j
    return out


@njit(cache=True)
def count_distinct_shifted(base, shifts):
    """Number of distinct values among ``base[i] + shifts[s]`` for all i, s.

    ``base`` strictly increasing: the shifted copies are sorted runs, merged
    head by head (linear in the number of values, no sort).
    """
    n = base.size
    k = shifts.size
    pos = np.zeros(k, np.int64)
    count = 0
    big = np.iinfo(np.int64).max
    while True:
        low = big
        for s in range(k):
            if pos[s] < n:
                v = base[pos[s]] + shifts[s]
                if v < low:
                    low = v
        if low == big:
            return count
        count += 1
        for s in range(k):
            if pos[s] < n and base[pos[s]] + shifts[s] == low:
                pos[s] += 1
