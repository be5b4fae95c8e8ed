"""thermo.dos.build: effort settings and the ladder a build runs on."""

import numpy as np
import pytest
from dos_samples import small_gas_dos

from thermo.dos.build import DosSettings


@pytest.fixture(scope="module")
def small_gas():
    """2+2 neutral gas in the unit disk, core 0.01, modest effort (tests/dos_samples.py)."""
    return small_gas_dos()


def test_settings_are_validated():
    from thermo.errors import SamplerError
    with pytest.raises(SamplerError, match="n_sweeps"):
        DosSettings(n_sweeps=1)


def test_build_ladder_ends(small_gas):
    """The build's pilot-spaced ladder keeps the physical ends, +1 (pair collapse) and
    1.15 x (-4/N) beyond the like-sign collapse [exact power counting, reference-values.md];
    the <C1>(0) check above runs on the observables of its strided configurations."""
    d = small_gas
    assert d.betas[0] == 1.0 and d.betas[-1] == pytest.approx(-1.15 * 4 / 4)
    assert np.all(np.diff(d.betas) < 0) and 0.0 in d.betas
