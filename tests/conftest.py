import numpy as np
import pytest


@pytest.fixture
def rng():
    """A seeded generator, so that every statistical test is reproducible."""
    return np.random.default_rng(20261202)
