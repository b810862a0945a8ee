"""Steady flow through a vessel network: every branch a Poiseuille tube,
Kirchhoff's laws at every node.

Each branch e of length L_e and radius r_e conducts g_e = pi r_e^4 / (8 mu L_e)
(Hagen-Poiseuille); the flow through it is q_e = g_e (p_u - p_v).  With the
pressure fixed at the inlets and the outlets, conservation of flow at every
other node (Kirchhoff's current law) is the sparse linear system
L_II p_I = -L_IB p_B of the weighted graph Laplacian L, split into free (I)
and fixed (B) nodes; it is solved once by a sparse LU factorisation (symmetric minimum-degree
order, no pivoting: the block is symmetric positive definite).  The
network's conductance is the total inflow over the pressure drop.

The values describe a model of the imaged lumen (rigid tubes, laminar
Newtonian flow, no entrance effects), not measured blood flow; they are
research measures of network geometry, not a physiological or clinical
assessment.

References
----------
Murray CD (1926) The physiological principle of minimum work. PNAS 12:207.
Sutera SP, Skalak R (1993) The history of Poiseuille's law. Annu Rev Fluid
Mech 25:1.
"""

from __future__ import annotations

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph
from scipy.sparse.linalg import splu

from ..errors import InputError

__all__ = ["network_flow", "flow_measures"]


def network_flow(graph, inlets, outlets, radius=None, viscosity=1.0, pressure_in=1.0,
                 pressure_out=0.0):
    """Pressures and branch flows of Poiseuille flow between inlets and outlets.

    Parameters
    ----------
    graph : SkeletonGraph
    inlets, outlets : sequence of int
        Node indices held at ``pressure_in`` and ``pressure_out``.
    radius : (E,) array, optional
        Branch radii (default ``graph.branch_radius()``, the volume-equivalent
        radius where known), in the graph's unit.
    viscosity : float
        Dynamic viscosity mu; with the default 1 the conductance is per unit
        viscosity (unit^3).

    Returns
    -------
    dict
        ``pressure`` (N,) (NaN on components without an inlet or outlet),
        ``flow`` (E,) signed from an edge's first node to its second,
        ``conductance`` (E,), ``total_flow`` and ``network_conductance``
        (total inflow / pressure drop).

    Examples
    --------
    Two tubes in series, radii 1 and 2, lengths 1 and 16: the resistances
    8/pi and 8/pi add, so the conductance is pi/16.

    >>> from skelmorph import SkeletonGraph
    >>> g = SkeletonGraph.from_edges([[0, 0], [0, 1], [0, 17]], [[0, 1], [1, 2]])
    >>> out = network_flow(g, [0], [2], radius=[1.0, 2.0])
    >>> round(out["network_conductance"] * 16 / 3.141592653589793, 12)
    1.0
    """
    n, e = graph.n_nodes, graph.n_edges
    inlets = np.unique(np.asarray(inlets, np.int64).ravel())
    outlets = np.unique(np.asarray(outlets, np.int64).ravel())
    if not len(inlets) or not len(outlets):
        raise InputError("flow needs at least one inlet and one outlet")
    if np.intersect1d(inlets, outlets).size:
        raise InputError("a node cannot be both an inlet and an outlet")
    if min(inlets.min(), outlets.min()) < 0 or max(inlets.max(), outlets.max()) >= n:
        raise InputError("inlet or outlet node does not exist")
    if not viscosity > 0 or pressure_in == pressure_out:
        raise InputError("flow needs a positive viscosity and a pressure drop")
    r = graph.branch_radius() if radius is None else np.asarray(radius, float)
    if r.shape != (e,):
        raise InputError(f"need one radius per branch ({e}), not {r.shape}")
    length = np.asarray(graph.edge_length, float)
    u, v = graph.edges[:, 0], graph.edges[:, 1]
    ok = (u != v) & (length > 0) & np.isfinite(r) & (r > 0)
    g = np.zeros(e)
    g[ok] = np.pi * r[ok] ** 4 / (8.0 * viscosity * length[ok])
    w = sparse.coo_matrix((np.concatenate([g, g]), (np.concatenate([u, v]),
                                                   np.concatenate([v, u]))), shape=(n, n)).tocsr()
    _, comp = csgraph.connected_components(w > 0, directed=False)
    if not np.intersect1d(comp[inlets], comp[outlets]).size:
        raise InputError("no conducting path joins an inlet to an outlet (the network is "
                         "disconnected between them)")
    fixed = np.zeros(n, bool)
    fixed[inlets] = fixed[outlets] = True
    p = np.full(n, np.nan)
    p[inlets], p[outlets] = pressure_in, pressure_out
    # Free nodes on a component that touches a fixed node get a pressure.
    reached = np.isin(comp, np.unique(comp[fixed]))
    free = reached & ~fixed
    lap = sparse.diags(np.asarray(w.sum(axis=1)).ravel()) - w
    if free.any():
        a = lap[free][:, free].tocsc()
        b = -(lap[free][:, fixed] @ p[fixed])
        # Free nodes joined only by non-conducting branches make the block singular.
        isolated = np.asarray(abs(a).sum(axis=1)).ravel() == 0
        if isolated.any():
            a = a + sparse.diags(isolated.astype(float))
        if a.shape[0] > 1:
            # The block is symmetric positive definite: minimum-degree order on
            # A + A^T and no pivoting keep the fill low (3x faster on 3D meshes).
            sol = splu(a, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                       options={"SymmetricMode": True}).solve(b)
        else:
            sol = b / a.toarray()[0, 0]
        sol = np.atleast_1d(sol).astype(float)
        sol[isolated] = np.nan
        p[np.flatnonzero(free)] = sol
    q = np.where(ok, g * (p[u] - p[v]), 0.0)
    q = np.nan_to_num(q)
    # Inflow: what leaves the inlets along their branches.
    is_in = np.zeros(n, bool)
    is_in[inlets] = True
    total = float(q[is_in[u] & ~is_in[v]].sum() - q[is_in[v] & ~is_in[u]].sum())
    total = float(total * np.sign(pressure_in - pressure_out))
    return {"pressure": p, "flow": q, "conductance": g, "total_flow": total,
            "network_conductance": total / abs(pressure_in - pressure_out)}


def flow_measures(graph, root):
    """Flow measures of the component of ``root``: the root is the inlet,
    every other tip of its component an outlet (pressure 1 and 0, viscosity 1).

    Returns
    -------
    summary : dict
        ``flow_conductance`` (unit^3, per unit viscosity), ``flow_resistance``,
        ``flow_weighted_radius``, ``flow_weighted_tortuosity``,
        ``flow_outlets``, ``flow_top_outlet_share`` (share of the inflow
        leaving by the outlet that takes most) and ``flow_top_decile_share``
        (by the tenth of the outlets that take most).
    columns : dict
        Per-branch ``flow`` (absolute, unit^3 per unit time and viscosity)
        and ``pressure_drop``, NaN off the component.
    """
    comp = graph.component_labels()
    deg = graph.node_degree
    outlets = np.flatnonzero((deg == 1) & (comp == comp[root]) & (np.arange(graph.n_nodes) != root))
    if not len(outlets):
        raise InputError("flow needs outlets: the root's component has no other free end")
    res = network_flow(graph, [root], outlets)
    q = np.abs(res["flow"])
    u, v = graph.edges[:, 0], graph.edges[:, 1]
    on = comp[u] == comp[root]
    r = graph.branch_radius()
    length = np.asarray(graph.edge_length, float)
    chord = np.linalg.norm(graph.nodes[u] - graph.nodes[v], axis=1)
    tort = np.where(chord > 0, length / np.where(chord > 0, chord, 1), np.nan)
    wq = np.where(on & np.isfinite(r), q, 0.0)
    keep_t = wq > 0
    keep_t &= np.isfinite(tort)
    # Outflow per outlet: the flow of the branches that reach it.
    out_flow = np.zeros(graph.n_nodes)
    np.add.at(out_flow, v, np.where(np.isin(v, outlets), res["flow"], 0.0))
    np.add.at(out_flow, u, np.where(np.isin(u, outlets), -res["flow"], 0.0))
    per_outlet = np.sort(out_flow[outlets])[::-1]
    total = res["total_flow"]
    top = max(1, int(np.ceil(0.1 * len(per_outlet))))
    summary = {
        "flow_conductance": res["network_conductance"],
        "flow_resistance": 1.0 / res["network_conductance"] if res["network_conductance"] > 0
        else float("inf"),
        "flow_weighted_radius": float(np.sum(wq * np.nan_to_num(r)) / wq.sum()) if wq.sum() > 0
        else float("nan"),
        "flow_weighted_tortuosity": float(np.sum(wq[keep_t] * tort[keep_t]) / wq[keep_t].sum())
        if keep_t.any() else float("nan"),
        "flow_outlets": int(len(outlets)),
        "flow_top_outlet_share": float(per_outlet[0] / total) if total > 0 else float("nan"),
        "flow_top_decile_share": float(per_outlet[:top].sum() / total) if total > 0
        else float("nan"),
    }
    p = res["pressure"]
    columns = {"flow": np.where(on, q, np.nan),
               "pressure_drop": np.where(on, np.abs(p[u] - p[v]), np.nan)}
    return summary, columns
