"""Shared test configuration. Area-specific fixtures live in their own test modules."""

# flowgauge first: it holds OpenBLAS and numpy to their AVX2 code before numpy loads
# (flowgauge/_numerics.py), so the tests compute as the command line does, on any x86-64 CPU
import flowgauge  # noqa: F401,I001

import numpy as np
import pytest


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)
