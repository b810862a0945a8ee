"""Radial (Sholl-type) profiles of trees and of graphs with loops, exact and in one sweep.

A radial profile describes how a structure grows as a ball around its root
widens (Sholl 1953, J Anat 87:387; the radial descriptor functions of Khalil
et al. 2022, PLoS Comput Biol 18:e1010229).  For a radius r, T_r is the part
of the centreline inside the closed ball B(c, r) that is connected to the
centre c.

One sweep
---------
Let d(p) = |p - c| and m(p) the smallest, over paths from c to p, of the
largest d met on the way (on a tree: the running maximum of d from the root;
on a graph: the minimax path value, read off the minimum spanning tree of the
segment weights max(d_u, d_v), which contains a minimax path to every point).
A point p is in T_r exactly when m(p) <= r.  A straight segment (u, v) with
m(u) <= m(v) is then

* wholly in T_r when r >= m(v) (both ends inside a convex ball);
* cut at the sphere when m(u) <= r < m(v): only the piece from u to the exit
  point lies in T_r, which gives one cut end;
* absent otherwise.

So every profile is a sum of step functions of r, read at sorted event values
with ``searchsorted``, plus exact terms for the segments cut at each radius
(the exit parameter solves a quadratic).  The work is one sort of the
events plus the number of cut ends summed over the radii; nothing is
recomputed per radius.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..tree import Tree

__all__ = ["radial_profiles", "profile_distance", "profile_summary", "profiles_on_grid",
           "PROFILE_COLUMNS"]

PROFILE_COLUMNS = ("radius", "crossings", "cut_ends", "total_length", "branch_points", "tips",
                   "branching_pattern", "leaf_index", "tortuosity", "flux_angle", "flux_cosine",
                   "field", "taper", "loops")


# ----------------------------------------------------------------- structure
class _Structure:
    """Points and straight segments, plus the tree order when the input is a Tree."""

    def __init__(self, pts, rad, seg, deg, root, parent=None, order=None):
        self.pts, self.rad, self.seg, self.deg, self.root = pts, rad, seg, deg, int(root)
        self.parent, self.order = parent, order
        self.is_graph = parent is None


def _from_tree(tree):
    child = np.flatnonzero(tree.parent >= 0)
    seg = np.column_stack([tree.parent[child], child])
    deg = tree.n_children + (tree.parent >= 0)
    return _Structure(tree.coords, tree.radius, seg, deg, tree.root, tree.parent, tree.order)


def _from_graph(graph, root):
    """Nodes first, then the interior polyline points; segments along each polyline."""
    off = graph.offsets
    n_nodes = graph.n_nodes
    interior = np.ones(len(graph.points), bool)
    interior[off[:-1]] = False
    interior[off[1:] - 1] = False
    pid = np.empty(len(graph.points), np.int64)
    pid[off[:-1]] = graph.edges[:, 0]
    pid[off[1:] - 1] = graph.edges[:, 1]
    pid[interior] = n_nodes + np.arange(interior.sum())
    pts = np.concatenate([graph.nodes, graph.points[interior]])
    rad = np.concatenate([graph.node_radius, graph.point_radius[interior]])
    second = np.ones(len(graph.points), bool)
    second[off[:-1]] = False
    k = np.flatnonzero(second)
    seg = np.column_stack([pid[k - 1], pid[k]])
    seg = seg[seg[:, 0] != seg[:, 1]]  # a branch with no interior point that loops on its node
    deg = np.bincount(seg.ravel(), minlength=len(pts))
    return _Structure(pts, rad, seg, deg, root)


def _chains(s, critical, seg_len):
    """Chains between critical points (see :func:`skelmorph._kernels.walk_chains`)."""
    from .._kernels import walk_chains
    n = len(s.pts)
    a, b = s.seg[:, 0], s.seg[:, 1]
    ends = np.concatenate([a, b])
    nbr = np.concatenate([b, a])
    sid = np.concatenate([np.arange(len(a)), np.arange(len(a))])
    order = np.argsort(ends, kind="stable")
    start = np.concatenate([[0], np.cumsum(np.bincount(ends, minlength=n))])
    return walk_chains(start, nbr[order], sid[order], critical, seg_len, a)


def _minimax(s, d):
    """m(p) for every point; parent and order of the minimax tree (graphs only)."""
    from scipy import sparse
    from scipy.sparse import csgraph

    from .._kernels import accumulate_max_down, kruskal
    n = len(s.pts)
    if not s.is_graph:
        return accumulate_max_down(s.order, s.parent, d)
    a, b = s.seg[:, 0], s.seg[:, 1]
    hi = np.maximum(d[a], d[b])
    lo = np.minimum(d[a], d[b])
    scan = np.lexsort((lo, hi))
    # Exact ties (voxel grids, symmetric structures) are broken by segment
    # midpoint, so the minimax tree never depends on numbering; only the tied
    # groups are re-sorted.
    hs, ls = hi[scan], lo[scan]
    new_group = np.ones(len(scan), bool)
    new_group[1:] = (hs[1:] != hs[:-1]) | (ls[1:] != ls[:-1])
    group = np.cumsum(new_group) - 1
    tied = np.flatnonzero(np.bincount(group)[group] > 1)
    if len(tied):
        sub = scan[tied]
        mid = 0.5 * (s.pts[a[sub]] + s.pts[b[sub]])
        keys = [mid[:, j] for j in range(mid.shape[1] - 1, -1, -1)]
        scan[tied] = sub[np.lexsort(keys + [group[tied]])]
    keep = kruskal(n, a, b, scan)
    t = sparse.coo_matrix((np.ones(keep.sum()), (a[keep], b[keep])), shape=(n, n)).tocsr()
    order, pred = csgraph.breadth_first_order(t, s.root, directed=False, return_predecessors=True)
    parent = np.where(pred >= 0, pred, -1).astype(np.int64)
    m = np.full(n, np.inf)
    m[order] = accumulate_max_down(order.astype(np.int64), parent, d)[order]
    s.parent, s.order = parent, order.astype(np.int64)
    return m


def _resolve_root(obj, root):
    if isinstance(obj, Tree):
        if root is not None:
            raise InputError("a Tree has its own root; do not pass root")
        return None
    from ..rooting import choose_root
    if root is None:
        return choose_root(obj, "thickest")
    if isinstance(root, str):
        return choose_root(obj, root)
    root = int(root)
    if not 0 <= root < obj.n_nodes:
        raise InputError(f"root {root} is not a node index (graph has {obj.n_nodes} nodes)")
    return root


# ------------------------------------------------------------------ profiles
def _count_below(sorted_values, r, side="right"):
    return np.searchsorted(sorted_values, r, side=side)


def radial_profiles(obj, root=None, radii=None, n_radii=200, weights=None):
    """Radial (Sholl-type) profiles of a tree or of a skeleton graph.

    Parameters
    ----------
    obj : Tree or SkeletonGraph
    root : int or str, optional
        For a graph: a node index or a root rule of :func:`skelmorph.choose_root`
        (default ``'thickest'``).  A Tree uses its own root.
    radii : array of float, optional
        Radii in the structure's unit, any order.  Default: ``n_radii`` evenly
        spaced radii up to the farthest point of the root's component.
    n_radii : int
    weights : None, 'radius' or array
        Charges of the field profile: unit (default), the local radius, or one
        value per point (Tree) / node (graph).

    Returns
    -------
    pandas.DataFrame
        One row per radius, in the order of ``radii``, columns
        ``radius`` and

        - ``crossings``: points where the whole centreline (every component)
          meets the sphere S(c, r) (the classic Sholl count);
        - ``cut_ends``: points where T_r meets the sphere;
        - ``total_length``: length of T_r, segments cut exactly at the sphere;
        - ``branch_points``: points of T_r with two or more child branches
          (degree >= 3, or >= 2 at the root); ``tips``: terminal points of the
          structure in T_r (cut ends are not tips); ``branching_pattern`` =
          branch_points - tips;
        - ``leaf_index``: mean, over the critical points of T_r (c, branch
          points, tips, cut ends), of the number of tips and cut ends below
          it (on graphs "below" follows the minimax tree);
        - ``tortuosity``: mean length / chord of the branches of T_r between
          consecutive critical points (closed rings skipped);
        - ``flux_angle`` (radians) and ``flux_cosine``: mean angle / cosine
          between the outgoing branch and the outward normal at the cut ends;
        - ``field``: magnitude at c of the Coulomb field sum q (c - x)/|c - x|^3
          of charges at the branch points of T_r (charges at c skipped);
        - ``taper``: mean radius at the cut ends;
        - ``loops``: independent loops of T_r (edges - points + 1).

        Means over empty sets are NaN.

    References
    ----------
    Sholl DA (1953) J Anat 87:387-406.  Khalil R et al. (2022) PLoS Comput
    Biol 18:e1010229.
    """
    import pandas as pd

    from ..graph import SkeletonGraph
    if not isinstance(obj, (Tree, SkeletonGraph)):
        raise InputError("radial_profiles needs a Tree or a SkeletonGraph")
    r0 = _resolve_root(obj, root)
    if isinstance(obj, Tree):
        s = _from_tree(obj)
    else:
        if obj.n_nodes == 0:
            raise InputError("the graph has no nodes")
        s = _from_graph(obj, r0)
    c = s.pts[s.root]
    d = np.linalg.norm(s.pts - c, axis=1)
    m = _minimax(s, d)
    reach = np.isfinite(m)
    if radii is None:
        if int(n_radii) < 1:
            raise InputError("n_radii must be at least 1")
        r_max = float(d[reach].max())
        radii = np.linspace(r_max / int(n_radii), r_max, int(n_radii)) if r_max > 0 else np.zeros(1)
    radii = np.asarray(radii, float).reshape(-1)
    if len(radii) == 0 or not np.all(np.isfinite(radii)) or np.any(radii < 0):
        raise InputError("radii must be a non-empty array of finite values >= 0")
    sort = np.argsort(radii, kind="stable")
    R = radii[sort]
    K = len(R)
    cols = {name: np.zeros(K) for name in PROFILE_COLUMNS[1:]}

    a, b = s.seg[:, 0], s.seg[:, 1]
    pa, pb = s.pts[a], s.pts[b]
    delta = pb - pa
    L = np.linalg.norm(delta, axis=1)

    # Crossings of the whole centreline: on each segment, d falls to its
    # minimum then rises, so the sphere is met once per end with d above r:
    # counts on (dmin, d_a] and (dmin, d_b].
    w = pa - c
    dd = np.einsum("ij,ij->i", delta, delta)
    t0 = np.clip(-np.einsum("ij,ij->i", w, delta) / np.where(dd > 0, dd, 1), 0, 1)
    dmin = np.linalg.norm(w + t0[:, None] * delta, axis=1)
    lo = np.sort(np.concatenate([dmin, dmin]))
    hi = np.sort(np.concatenate([d[a], d[b]]))
    cols["crossings"] = (np.searchsorted(lo, R, "left") - np.searchsorted(hi, R, "left")).astype(float)

    # Points, complete segments and loops.
    ma, mb = m[a], m[b]
    inner_first = ma <= mb
    m_in = np.where(inner_first, ma, mb)
    m_out = np.where(inner_first, mb, ma)
    order_full = np.argsort(m_out, kind="stable")
    full_sorted = m_out[order_full]
    full_len = np.concatenate([[0.0], np.cumsum(L[order_full])])
    n_full = _count_below(full_sorted, R)
    m_sorted = np.sort(m[reach])
    n_pts = _count_below(m_sorted, R)
    cols["loops"] = (n_full - n_pts + 1).astype(float)

    # Critical points: root, branch points (degree >= 3, root >= 2), tips.
    is_root = np.zeros(len(d), bool)
    is_root[s.root] = True
    bp = reach & ((s.deg >= 3) | (is_root & (s.deg >= 2)))
    tip = reach & (s.deg == 1) & ~is_root
    cols["branch_points"] = _count_below(np.sort(m[bp]), R).astype(float)
    tip_sorted = np.argsort(m[tip], kind="stable")
    cols["tips"] = _count_below(m[tip][tip_sorted], R).astype(float)
    cols["branching_pattern"] = cols["branch_points"] - cols["tips"]

    # Leaf index: sum over leaves of their critical ancestors-or-self.
    from .._kernels import accumulate_down
    crit = (bp | is_root).astype(float)
    anc = np.zeros(len(d))
    anc[s.order] = accumulate_down(s.order, s.parent, crit)[s.order] + crit[s.root]
    tip_anc = np.concatenate([[0.0], np.cumsum((anc[tip] + 1)[tip_sorted])])
    bp_nonroot = _count_below(np.sort(m[bp & ~is_root]), R)

    # Field of charges at branch points (cumulative vector sum by m).
    q = _charges(obj, s, weights)
    bpi = np.flatnonzero(bp)
    vec = c - s.pts[bpi]
    dist = np.linalg.norm(vec, axis=1)
    ok = dist > 1e-12 * max(1.0, float(d.max()))
    contrib = np.where(ok[:, None], q[bpi, None] * vec / np.where(ok, dist, 1)[:, None] ** 3, 0.0)
    fo = np.argsort(m[bpi], kind="stable")
    field = np.vstack([np.zeros(len(c)), np.cumsum(contrib[fo], axis=0)])
    cols["field"] = np.linalg.norm(field[_count_below(m[bpi][fo], R)], axis=1)

    # Complete branches for tortuosity: chains between critical points (any
    # point of degree other than two, and the root), complete once their
    # farthest-entering segment is in.
    anchor_of, arc_of, chain, c_len, c_start, c_end = _chains(s, (s.deg != 2) | is_root, L)
    walked = chain >= 0
    c_done = np.full(len(c_len), -np.inf)
    np.maximum.at(c_done, chain[walked], m_out[walked])
    c_chord = np.linalg.norm(s.pts[c_start] - s.pts[c_end], axis=1)
    good = np.isfinite(c_done) & (c_chord > 1e-12)
    bo = np.argsort(c_done[good], kind="stable")
    ratio = np.concatenate([[0.0], np.cumsum((c_len[good] / c_chord[good])[bo])])
    nb_full = _count_below(c_done[good][bo], R)

    # Segments cut at the sphere: active for m_in <= r < m_out.
    k0 = np.searchsorted(R, m_in, "left")
    k1 = np.searchsorted(R, m_out, "left")
    k1 = np.where(np.isfinite(m_in), k1, k0)
    n_act = np.maximum(k1 - k0, 0)
    # Per segment, oriented from its inner end u: everything a cut needs is a
    # scalar of the exit parameter t, so per (segment, radius) pair only 1-D
    # gathers and arithmetic remain.
    act = np.flatnonzero(n_act)
    first_a = inner_first[act]
    u_s = np.where(first_a, a[act], b[act])
    v_s = np.where(first_a, b[act], a[act])
    du_s = s.pts[v_s] - s.pts[u_s]
    wu_s = s.pts[u_s] - c
    A_s = np.einsum("ij,ij->i", du_s, du_s)
    B_s = np.einsum("ij,ij->i", wu_s, du_s)
    W_s = np.einsum("ij,ij->i", wu_s, wu_s)
    side_s = np.where(first_a, 0, 1)
    anchor_s = anchor_of[act, side_s]
    q_s = s.pts[u_s] - s.pts[anchor_s]
    Q_s = np.einsum("ij,ij->i", q_s, q_s)
    QD_s = np.einsum("ij,ij->i", q_s, du_s)
    arc_s = arc_of[act, side_s]
    ru_s, dr_s = s.rad[u_s], s.rad[v_s] - s.rad[u_s]
    anc_s = anc[u_s] + 1
    na = n_act[act]
    j = np.repeat(np.arange(len(act)), na)
    ks = np.repeat(k0[act], na) + (np.arange(na.sum()) - np.repeat(np.cumsum(na) - na, na))
    r = R[ks]
    A, B = A_s[j], B_s[j]
    disc = np.maximum(B * B - A * (W_s[j] - r * r), 0.0)
    t = np.clip((-B + np.sqrt(disc)) / np.where(A > 0, A, 1), 0.0, 1.0)
    seg_len = np.sqrt(A)
    nk = np.bincount(ks, minlength=K).astype(float)
    cols["cut_ends"] = nk
    cols["total_length"] = full_len[n_full] + np.bincount(ks, t * seg_len, K)
    # Leaf index.
    leaves = cols["tips"] + nk
    n_crit = 1 + bp_nonroot + leaves
    s_sum = tip_anc[cols["tips"].astype(int)] + np.bincount(ks, anc_s[j], K)
    cols["leaf_index"] = s_sum / n_crit
    # Tortuosity: complete branches plus the pieces from an anchor to a cut;
    # |cut - anchor|^2 = |q|^2 + 2 t q.du + t^2 |du|^2.
    piece_len = arc_s[j] + t * seg_len
    piece_chord = np.sqrt(np.maximum(Q_s[j] + 2 * t * QD_s[j] + t * t * A, 0.0))
    pok = piece_chord > 1e-12
    n_br = nb_full + np.bincount(ks[pok], minlength=K)
    tot = ratio[nb_full] + np.bincount(ks[pok], piece_len[pok] / piece_chord[pok], K)
    # Flux: the outward normal at the cut is (wu + t du) / r, so the cosine is
    # (B + t A) / (|du| r).  Angles near 0 or pi use Kahan's formula
    # 2 atan2(|a - b|, |a + b|) on unit vectors, where arccos loses half the digits.
    cosang = np.clip((B + t * A) / np.maximum(seg_len * r, 1e-300), -1.0, 1.0)
    angle = np.arccos(cosang)
    near = np.flatnonzero(np.abs(cosang) > 0.99)
    if len(near):
        dn = du_s[j[near]]
        nu = dn / np.maximum(seg_len[near], 1e-300)[:, None]
        normal = wu_s[j[near]] + t[near, None] * dn
        nn = normal / np.maximum(np.linalg.norm(normal, axis=1), 1e-300)[:, None]
        angle[near] = 2 * np.arctan2(np.linalg.norm(nu - nn, axis=1), np.linalg.norm(nu + nn, axis=1))
    r_cut = ru_s[j] + t * dr_s[j]
    with np.errstate(invalid="ignore", divide="ignore"):
        cols["tortuosity"] = np.where(n_br > 0, tot / n_br, np.nan)
        cols["flux_cosine"] = np.bincount(ks, cosang, K) / nk
        cols["flux_angle"] = np.bincount(ks, angle, K) / nk
        cols["taper"] = np.bincount(ks, r_cut, K) / nk
    inv = np.empty(K, np.int64)
    inv[sort] = np.arange(K)
    table = {"radius": radii}
    for name in PROFILE_COLUMNS[1:]:
        table[name] = cols[name][inv]
    out = pd.DataFrame(table, columns=list(PROFILE_COLUMNS))
    out.attrs.update(root=int(s.root), center=[float(x) for x in c], ndim=int(len(c)))
    return out


def _charges(obj, s, weights):
    n = len(s.pts)
    if weights is None:
        return np.ones(n)
    if isinstance(weights, str):
        if weights != "radius":
            raise InputError("weights must be None, 'radius' or an array")
        q = np.nan_to_num(s.rad, nan=0.0)
        return q
    w = np.asarray(weights, float).reshape(-1)
    expected = n if isinstance(obj, Tree) else obj.n_nodes
    if len(w) != expected or not np.all(np.isfinite(w)):
        raise InputError(f"weights must hold {expected} finite values (one per "
                         f"{'point' if isinstance(obj, Tree) else 'node'})")
    q = np.zeros(n)
    q[:len(w)] = w
    return q


# ----------------------------------------------------------- summaries, distances
def profile_summary(profile):
    """Maximum crossings, its radius, and Sholl's regression coefficient (Sholl 1953).

    The decay coefficient k is minus the slope of the least-squares line of
    log(crossings / S(r)) against r over radii with crossings > 0 (Sholl
    1953's semi-log method), where S(r) is the sphere area 4 pi r^2 in 3D and
    the circle length 2 pi r in 2D.
    """
    r = np.asarray(profile["radius"], float)
    n = np.asarray(profile["crossings"], float)
    ndim = profile.attrs.get("ndim", 3)
    i = int(np.argmax(n)) if len(n) else 0
    ok = (n > 0) & (r > 0)
    k = float("nan")
    if ok.sum() >= 2:
        area = 4 * np.pi * r[ok] ** 2 if ndim == 3 else 2 * np.pi * r[ok]
        slope = np.polyfit(r[ok], np.log(n[ok] / area), 1)[0]
        k = float(-slope)
    return {"max_crossings": float(n[i]) if len(n) else 0.0,
            "radius_of_max_crossings": float(r[i]) if len(n) else float("nan"),
            "sholl_regression_coefficient": k}


def profile_distance(a, b, column, p=1, normalise=False, n_grid=512):
    """L^p distance between one column of two profiles, over r on a common grid.

    Both profiles are linearly interpolated on ``n_grid`` radii spanning the
    union of their ranges (held constant beyond their last radius); NaN
    counts as 0.  ``normalise`` divides each profile's radii by its largest
    radius first (compare shapes, not sizes).
    """
    if column not in PROFILE_COLUMNS[1:]:
        raise InputError(f"unknown profile column {column!r}")
    if not p >= 1:
        raise InputError("p must be >= 1")
    ra = np.asarray(a["radius"], float)
    rb = np.asarray(b["radius"], float)
    ia, ib = np.argsort(ra), np.argsort(rb)
    ra, rb = ra[ia], rb[ib]
    ya = np.nan_to_num(np.asarray(a[column], float)[ia])
    yb = np.nan_to_num(np.asarray(b[column], float)[ib])
    if normalise:
        ra = ra / ra.max() if ra.max() > 0 else ra
        rb = rb / rb.max() if rb.max() > 0 else rb
    grid = np.linspace(min(ra.min(), rb.min()), max(ra.max(), rb.max()), int(n_grid))
    diff = np.abs(np.interp(grid, ra, ya) - np.interp(grid, rb, yb)) ** p
    from scipy.integrate import trapezoid
    return float(trapezoid(diff, grid) ** (1.0 / p))


def profiles_on_grid(profiles, samples, column, grid):
    """One profile column per sample on a common radius grid, (n_samples, len(grid)).

    ``profiles`` is a long table (pandas) with ``sample``, ``radius`` and the
    column; values are interpolated linearly, NaN counts as 0, and a sample
    without rows stays 0.
    """
    grid = np.asarray(grid, float)
    out = np.zeros((len(samples), len(grid)))
    row = {s: i for i, s in enumerate(samples)}
    for s, p in profiles.groupby("sample", sort=False):
        if s in row:
            p = p.sort_values("radius")
            out[row[s]] = np.interp(grid, p["radius"].to_numpy(float),
                                    np.nan_to_num(p[column].to_numpy(float)))
    return out
