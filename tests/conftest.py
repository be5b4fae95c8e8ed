import numpy as np
import pytest
from tiny_protocol import TINY

from gpe.cli.main import main


@pytest.fixture
def rng():
    """A seeded generator, so that every statistical test is reproducible."""
    return np.random.default_rng(20261202)


@pytest.fixture
def tiny(tmp_path):
    """The tiny protocol written to tmp_path/tiny.toml."""
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return path


@pytest.fixture
def tiny_run(tiny, tmp_path):
    """The tiny protocol simulated through the command line into tmp_path/tiny.h5."""
    out = tmp_path / "tiny.h5"
    assert main(["run", str(tiny), "-o", str(out)]) == 0
    return out
