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
