"""The embedded skeleton graph and its exports.

A :class:`SkeletonGraph` is a multigraph embedded in physical space: nodes are
junctions, tips and ring anchors; each edge (a *branch*) carries the polyline
of its centreline with a radius at every point.  Parallel edges and
self-loops are legal (a closed ring with no junction is one node with a
self-loop).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph

from .errors import SkelmorphError
from .io import atomic_write, format_numbers

__all__ = ["SkeletonGraph", "BRANCH_KINDS"]

#: Branch kinds by the degrees of their end nodes.
BRANCH_KINDS = ("terminal", "internal", "isolated", "ring")


def _axis_names(ndim):
    return ("z", "y", "x")[-ndim:]


@dataclass(frozen=True, eq=False)
class SkeletonGraph:
    """Centreline network of a 2D or 3D structure, in physical units.

    Attributes
    ----------
    nodes : (N, d) float array
        Node positions, axis order ``(z, y, x)`` / ``(y, x)``, in ``unit``.
    node_radius : (N,) float array
        Distance from the node to the background, in ``unit``.
    node_degree : (N,) int array
        Number of edge ends at the node (a self-loop counts twice).
    edges : (E, 2) int array
        End nodes of each edge.  A polyline runs from ``edges[e, 0]`` to
        ``edges[e, 1]``.
    points : (K, d) float array
        All edge polylines, stored flat; edge ``e`` is
        ``points[offsets[e]:offsets[e + 1]]``, starting and ending at its nodes.
    point_radius : (K,) float array
        Radius at every polyline point, in ``unit``.
    offsets : (E + 1,) int array
    edge_length : (E,) float array
        Length of each edge's (smoothed) polyline, in ``unit``.
    spacing : tuple of float
        Voxel size of the source image.
    unit : str
        Length unit.
    shape : tuple of int
        Shape of the source image, in voxels (for densities and faces).
    meta : dict
        How the graph was made (options, conventions).
    edge_radius : (E,) float array, optional
        Volume-equivalent radius of each branch
        (:func:`skelmorph.radius.equivalent_radius`); NaN where a branch is
        too short to have one.  See :meth:`branch_radius`.
    """

    nodes: np.ndarray
    node_radius: np.ndarray
    node_degree: np.ndarray
    edges: np.ndarray
    points: np.ndarray
    point_radius: np.ndarray
    offsets: np.ndarray
    edge_length: np.ndarray
    spacing: tuple
    unit: str = "um"
    shape: tuple = ()
    meta: dict = field(default_factory=dict)
    edge_radius: np.ndarray = None

    # ------------------------------------------------------------------ basics
    @property
    def ndim(self):
        return self.nodes.shape[1]

    @property
    def n_nodes(self):
        return len(self.nodes)

    @property
    def n_edges(self):
        return len(self.edges)

    def edge_points(self, e):
        """Polyline of edge ``e`` as a (n, d) view."""
        return self.points[self.offsets[e]:self.offsets[e + 1]]

    def edge_radii(self, e):
        return self.point_radius[self.offsets[e]:self.offsets[e + 1]]

    def adjacency(self):
        """Symmetric sparse node adjacency (number of edges between each pair)."""
        n = self.n_nodes
        u, v = self.edges[:, 0], self.edges[:, 1]
        data = np.ones(len(u))
        a = sparse.coo_matrix((data, (u, v)), shape=(n, n))
        return (a + a.T).tocsr()

    @cached_property
    def _components(self):
        if self.n_nodes == 0:
            return 0, np.zeros(0, int)
        n, labels = csgraph.connected_components(self.adjacency(), directed=False)
        return int(n), labels

    def component_labels(self):
        """Connected component of every node, (N,) int array."""
        return self._components[1].copy()

    @property
    def n_components(self):
        return self._components[0]

    @property
    def cycle_rank(self):
        """Number of independent loops, E - V + C (first Betti number)."""
        return int(self.n_edges - self.n_nodes + self.n_components)

    @property
    def edge_chord(self):
        """Straight-line distance between the end points of each edge."""
        first = self.points[self.offsets[:-1]]
        last = self.points[self.offsets[1:] - 1]
        return np.linalg.norm(last - first, axis=1)

    @property
    def edge_kind(self):
        """Kind of each edge: terminal, internal, isolated or ring (see BRANCH_KINDS)."""
        u, v = self.edges[:, 0], self.edges[:, 1]
        du, dv = self.node_degree[u], self.node_degree[v]
        tips = (du == 1).astype(int) + (dv == 1).astype(int)
        kind = np.where(tips == 2, "isolated", np.where(tips == 1, "terminal", "internal"))
        return np.where(u == v, "ring", kind).astype(object)

    def branch_radius(self):
        """One radius per branch: the volume-equivalent radius where there is
        one, else the length-weighted mean of the point radii."""
        mean, _, _ = self.edge_radius_stats()
        if self.edge_radius is None or len(self.edge_radius) != self.n_edges:
            return mean
        return np.where(np.isfinite(self.edge_radius), self.edge_radius, mean)

    def edge_radius_stats(self):
        """Per-edge mean, min and max radius over polyline points (length-weighted mean)."""
        from .polyline import edge_index
        eid = edge_index(self.offsets)
        n = self.n_edges
        r = self.point_radius
        # Weight each point by half of its two adjacent segments.
        steps = np.zeros(len(self.points))
        if len(self.points) > 1:
            steps[1:] = np.linalg.norm(np.diff(self.points, axis=0), axis=1)
        steps[self.offsets[:-1]] = 0.0
        w = 0.5 * steps
        w[:-1] += 0.5 * steps[1:]
        w = np.where(w > 0, w, 1e-12)
        mean = np.bincount(eid, w * r, n) / np.bincount(eid, w, n)
        rmin = np.full(n, np.inf)
        rmax = np.full(n, -np.inf)
        np.minimum.at(rmin, eid, r)
        np.maximum.at(rmax, eid, r)
        return mean, rmin, rmax

    # ------------------------------------------------------------------ exports
    def to_networkx(self):
        """The graph as a :class:`networkx.MultiGraph`.

        Node attributes: one coordinate per axis (``z``, ``y``, ``x``),
        ``radius``, ``degree``.  Edge attributes: ``branch`` (edge index),
        ``length``, ``radius_mean``, ``kind`` and ``points`` (the polyline,
        (n, d) array).
        """
        import networkx as nx

        g = nx.MultiGraph(unit=self.unit, spacing=list(self.spacing))
        names = _axis_names(self.ndim)
        for i in range(self.n_nodes):
            attrs = {a: float(c) for a, c in zip(names, self.nodes[i])}
            g.add_node(i, radius=float(self.node_radius[i]), degree=int(self.node_degree[i]), **attrs)
        mean, _, _ = self.edge_radius_stats()
        kinds = self.edge_kind
        for e, (u, v) in enumerate(self.edges):
            g.add_edge(int(u), int(v), key=e, branch=e, length=float(self.edge_length[e]),
                       radius_mean=float(mean[e]), kind=str(kinds[e]), points=self.edge_points(e).copy())
        return g

    def to_vtk(self):
        """The centrelines as :class:`pyvista.PolyData` (one line cell per edge).

        VTK points are ``(x, y, z)``; 2D graphs get ``z = 0``.  Point data:
        ``radius``; cell data: ``branch``, ``length``.
        """
        import pyvista as pv

        pts = self._vtk_points()
        counts = np.diff(self.offsets)
        cells = np.insert(np.arange(len(pts)), self.offsets[:-1], counts)
        poly = pv.PolyData(pts, lines=cells if self.n_edges else None)
        poly.point_data["radius"] = self.point_radius
        if self.n_edges:
            poly.cell_data["branch"] = np.arange(self.n_edges)
            poly.cell_data["length"] = self.edge_length
        return poly

    def _vtk_points(self):
        xyz = self.points[:, ::-1]
        if self.ndim == 2:
            xyz = np.column_stack([xyz, np.zeros(len(xyz))])
        return np.ascontiguousarray(xyz, dtype=float)

    def write(self, path):
        """Write the graph; the format follows the suffix.

        ``.graphml``
            GraphML (networkx); polylines as a flat text attribute.
        ``.vtp``
            VTK XML PolyData (ASCII), readable by ParaView and pyvista.
        ``.json`` / ``.npz``
            All arrays; read back with :meth:`read`.
        """
        path = Path(path)
        suffix = path.suffix.lower()
        if suffix == ".graphml":
            self._write_graphml(path)
        elif suffix == ".vtp":
            self._write_vtp(path)
        elif suffix == ".json":
            with atomic_write(path, "w", encoding="utf-8") as fh:
                json.dump(self._as_dict(lists=True), fh)
        elif suffix == ".npz":
            with atomic_write(path, "wb") as fh:
                np.savez(fh, **{k: np.asarray(v) if k != "meta" else json.dumps(v)
                                           for k, v in self._as_dict(lists=False).items()})
        else:
            raise SkelmorphError(f"unknown graph format {suffix!r}; use .graphml, .vtp, .json or .npz")

    _ARRAYS = ("nodes", "node_radius", "node_degree", "edges", "points", "point_radius",
               "offsets", "edge_length")

    def _as_dict(self, lists):
        d = {k: getattr(self, k) for k in self._ARRAYS}
        if lists:
            d = {k: v.tolist() for k, v in d.items()}
        d.update(spacing=list(self.spacing), unit=self.unit, shape=list(self.shape), meta=self.meta)
        if self.edge_radius is not None:
            d["edge_radius"] = self.edge_radius.tolist() if lists else self.edge_radius
        return d

    @classmethod
    def from_edges(cls, nodes, edges, node_radius=None, unit="um", polylines=None):
        """A graph with straight branches (or given polylines) from node positions and edges.

        Useful for abstract networks and tests.  ``polylines``, when given,
        is a list of (n_e, d) arrays that start and end at their edge's nodes.
        """
        from .polyline import polyline_lengths
        nodes = np.asarray(nodes, float)
        if nodes.ndim != 2 or not np.all(np.isfinite(nodes)):
            raise SkelmorphError("nodes must be an (N, d) array of finite positions")
        edges = np.asarray(edges, np.int64).reshape(-1, 2)
        n = len(nodes)
        if len(edges) and (edges.min() < 0 or edges.max() >= n):
            raise SkelmorphError("edges refer to nodes that do not exist")
        if polylines is None:
            polylines = [nodes[[a, b]] for a, b in edges]
        if len(polylines) != len(edges):
            raise SkelmorphError("need one polyline per edge")
        counts = np.array([len(p) for p in polylines], np.int64)
        offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
        points = np.concatenate(polylines) if len(polylines) else np.zeros((0, nodes.shape[1]))
        radius = np.ones(n) if node_radius is None else np.asarray(node_radius, float)
        degree = np.bincount(edges.ravel(), minlength=n).astype(np.int64)
        # Point radii interpolate linearly between the end nodes.
        t = np.concatenate([np.linspace(0, 1, c) for c in counts]) if len(counts) else np.zeros(0)
        ra = np.repeat(radius[edges[:, 0]], counts)
        rb = np.repeat(radius[edges[:, 1]], counts)
        return cls(nodes=nodes, node_radius=radius, node_degree=degree, edges=edges,
                   points=points.astype(float), point_radius=ra + t * (rb - ra), offsets=offsets,
                   edge_length=polyline_lengths(points, offsets), spacing=(1.0,) * nodes.shape[1],
                   unit=unit, shape=(), meta={"source": "from_edges"})

    @classmethod
    def read(cls, path):
        """Read a graph written by :meth:`write` as ``.json`` or ``.npz``."""
        path = Path(path)
        try:
            if path.suffix.lower() == ".json":
                d = json.loads(path.read_text(encoding="utf-8"))
            elif path.suffix.lower() == ".npz":
                with np.load(path, allow_pickle=False) as z:
                    d = {k: z[k] for k in z.files}
                d["meta"] = json.loads(str(d["meta"]))
                d["unit"] = str(d["unit"])
            else:
                raise SkelmorphError(f"can only read .json or .npz graphs, not {path.suffix!r}")
        except (OSError, ValueError, KeyError) as exc:
            raise SkelmorphError(f"cannot read graph {path}: {exc}") from None
        nd = len(d["spacing"])
        arrays = dict(
            nodes=np.asarray(d["nodes"], float).reshape(-1, nd),
            node_radius=np.asarray(d["node_radius"], float),
            node_degree=np.asarray(d["node_degree"], np.int64),
            edges=np.asarray(d["edges"], np.int64).reshape(-1, 2),
            points=np.asarray(d["points"], float).reshape(-1, nd),
            point_radius=np.asarray(d["point_radius"], float),
            offsets=np.asarray(d["offsets"], np.int64),
            edge_length=np.asarray(d["edge_length"], float),
        )
        if "edge_radius" in d:
            arrays["edge_radius"] = np.asarray(d["edge_radius"], float)
        return cls(**arrays, spacing=tuple(float(s) for s in d["spacing"]), unit=str(d["unit"]),
                   shape=tuple(int(s) for s in d["shape"]), meta=dict(d.get("meta") or {}))

    def _write_graphml(self, path):
        """GraphML (an open standard) written directly, vectorised over nodes and edges.

        The same keys as :meth:`to_networkx`, with each polyline as a string of
        coordinates; ``networkx.read_graphml`` reads it back (tested).
        """
        from xml.sax.saxutils import escape

        names = _axis_names(self.ndim)
        mean, _, _ = self.edge_radius_stats()
        node_keys = [("radius", "double"), ("degree", "long")] + [(a, "double") for a in names]
        edge_keys = [("branch", "long"), ("length", "double"), ("radius_mean", "double"),
                     ("kind", "string"), ("points", "string")]
        head = ['<?xml version="1.0" encoding="utf-8"?>',
                '<graphml xmlns="http://graphml.graphdrawing.org/xmlns" '
                'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance" '
                'xsi:schemaLocation="http://graphml.graphdrawing.org/xmlns '
                'http://graphml.graphdrawing.org/xmlns/1.0/graphml.xsd">',
                '<key id="g0" for="graph" attr.name="unit" attr.type="string"/>',
                '<key id="g1" for="graph" attr.name="spacing" attr.type="string"/>']
        head += [f'<key id="n{i}" for="node" attr.name="{k}" attr.type="{t}"/>'
                 for i, (k, t) in enumerate(node_keys)]
        head += [f'<key id="e{i}" for="edge" attr.name="{k}" attr.type="{t}"/>'
                 for i, (k, t) in enumerate(edge_keys)]
        head.append('<graph edgedefault="undirected">')
        head.append(f'<data key="g0">{escape(self.unit)}</data>')
        head.append(f'<data key="g1">{" ".join(repr(float(s)) for s in self.spacing)}</data>')
        cols = [self.node_radius, self.node_degree] + [self.nodes[:, a] for a in range(self.ndim)]
        fmt = ('<node id="%d">' + "".join(
            f'<data key="n{i}">%{"d" if t == "long" else "r"}</data>'
            for i, (_, t) in enumerate(node_keys)) + "</node>")
        d = self.ndim
        kinds = self.edge_kind
        off = self.offsets
        block = 20000  # written block by block: memory does not grow with the graph
        with atomic_write(path, "w", encoding="utf-8") as fh:
            fh.write("\n".join(head) + "\n")
            for a in range(0, self.n_nodes, block):
                b = min(a + block, self.n_nodes)
                fh.write("\n".join(fmt % row for row in zip(
                    range(a, b), *[c[a:b].tolist() for c in cols])) + "\n")
            for a in range(0, self.n_edges, block):
                b = min(a + block, self.n_edges)
                base = int(off[a])
                coord = format_numbers(self.points[base:int(off[b])])
                lines = []
                for e, (u, v) in enumerate(self.edges[a:b].tolist(), start=a):
                    pts = " ".join(coord[(int(off[e]) - base) * d:(int(off[e + 1]) - base) * d])
                    lines.append(f'<edge id="{e}" source="{u}" target="{v}"><data key="e0">{e}'
                                 f'</data><data key="e1">{float(self.edge_length[e])!r}</data>'
                                 f'<data key="e2">{float(mean[e])!r}</data>'
                                 f'<data key="e3">{kinds[e]}</data><data key="e4">{pts}</data>'
                                 "</edge>")
                fh.write("\n".join(lines) + "\n")
            fh.write("</graph>\n</graphml>\n")

    def _write_vtp(self, path):
        pts = self._vtk_points()
        counts = np.diff(self.offsets)

        def block(fh, name, arr, ncomp=1, vtype="Float64"):
            # Inline binary: base64 of a 64-bit byte count followed by the
            # little-endian values (VTK XML "binary" format, header UInt64),
            # encoded in pieces of whole 3-byte groups so memory stays flat.
            import base64
            data = np.ascontiguousarray(arr, dtype="<f8" if vtype == "Float64" else "<i8")
            raw = memoryview(data.reshape(-1).view(np.uint8))
            fh.write(f'<DataArray type="{vtype}" Name="{name}" NumberOfComponents="{ncomp}" '
                     'format="binary">')
            head = np.uint64(raw.nbytes).tobytes()
            step = 3 * 2**20
            first = (head + bytes(raw[:step - len(head)]))
            fh.write(base64.b64encode(first).decode("ascii"))
            for i in range(step - len(head), raw.nbytes, step):
                fh.write(base64.b64encode(raw[i:i + step]).decode("ascii"))
            fh.write("</DataArray>\n")

        with atomic_write(path, "w", encoding="utf-8") as fh:
            fh.write('<?xml version="1.0"?>\n'
                     '<VTKFile type="PolyData" version="1.0" byte_order="LittleEndian" '
                     'header_type="UInt64">\n<PolyData>\n'
                     f'<Piece NumberOfPoints="{len(pts)}" NumberOfVerts="0" '
                     f'NumberOfLines="{self.n_edges}" NumberOfStrips="0" NumberOfPolys="0">\n'
                     '<PointData Scalars="radius">\n')
            block(fh, "radius", self.point_radius)
            fh.write("</PointData>\n<CellData>\n")
            block(fh, "branch", np.arange(self.n_edges), vtype="Int64")
            block(fh, "length", self.edge_length)
            fh.write("</CellData>\n<Points>\n")
            block(fh, "Points", pts, ncomp=3)
            fh.write("</Points>\n<Lines>\n")
            block(fh, "connectivity", np.arange(len(pts)), vtype="Int64")
            block(fh, "offsets", np.cumsum(counts), vtype="Int64")
            fh.write("</Lines>\n</Piece>\n</PolyData>\n</VTKFile>\n")
