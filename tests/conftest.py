import numpy as np
import pytest

from gpe.cli.main import main
from tiny_protocol import tiny_protocol_text


@pytest.fixture
def rng():
    """A seeded generator, so that every statistical test is reproducible."""
    return np.random.default_rng(20261202)


#: The tiny protocol of the command-line tests: a row of three beams crossing a 20 xi disk.
TINY = tiny_protocol_text(duration=10.0, output_interval=2.0, rows=3, speed=0.6)


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
