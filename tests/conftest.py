import os

import numpy as np

import pytest
from hypothesis import HealthCheck, settings

# CI must not flake: derandomized examples there, a broader search locally.
settings.register_profile("ci", derandomize=True, max_examples=25, deadline=None,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("dev", max_examples=40, deadline=None,
                          suppress_health_check=[HealthCheck.too_slow])
settings.load_profile("ci" if os.environ.get("CI") else "dev")


@pytest.fixture(autouse=True)
def _quiet_matplotlib(monkeypatch):
    monkeypatch.setenv("MPLBACKEND", "Agg")


# ------------------------------------------------------------ shared shapes
def square_rod_lattice(n, a, d):
    """n^3 cells of period a with square rods of side d through the cell
    centres, cut by the box faces (methods dossier 5.6)."""
    size = n * a
    line = np.zeros(size, bool)
    for i in range(n):
        c = i * a + a // 2
        line[c - d // 2:c - d // 2 + d] = True
    z, y, x = np.meshgrid(line, line, line, indexing="ij")
    return (y & x) | (z & x) | (z & y)


def binary_tree_layout(depth, radius_of_generation, length_of_generation, spread=0.4):
    """A stem then ``depth`` generations of binary splits in the plane:
    (parent, coords, radius, generation) per point, the root first."""
    parent, coords = [-1, 0], [[0.0, 0.0], [0.0, length_of_generation(0)]]
    radius, generation = [radius_of_generation(0)] * 2, [0, 0]
    frontier = [(1, 0.0, length_of_generation(0), np.pi / 2)]
    for g in range(1, depth + 1):
        nxt = []
        for node, x, y, a in frontier:
            for turn in (-spread, spread):
                b, step = a + turn, length_of_generation(g)
                coords.append([x + step * np.cos(b), y + step * np.sin(b)])
                parent.append(node)
                radius.append(radius_of_generation(g))
                generation.append(g)
                nxt.append((len(coords) - 1, coords[-1][0], coords[-1][1], b))
        frontier = nxt
    return parent, coords, radius, generation
