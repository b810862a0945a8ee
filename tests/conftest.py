import os

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
