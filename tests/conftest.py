"""Shared fixtures: `engine` runs a test once per physics engine (MuJoCo only where it is installed)."""

import pytest

from harness.sim.engines import ENGINES, engine_available


@pytest.fixture(params=ENGINES)
def engine(request):
    if not engine_available(request.param):
        pytest.skip(f"engine {request.param!r} is not installed (pip install -e '.[mujoco]')")
    return request.param
