"""The vortex-gas side of vortherm: point-vortex statistical mechanics in bounded domains.

Never imports ``gpe``; depends only on numpy, scipy, numba and h5py.
"""

from importlib.metadata import PackageNotFoundError as _PackageNotFoundError
from importlib.metadata import version as _version


def _installed_version() -> str:
    # one distribution (vortherm) ships gpe and thermo; pyproject.toml holds the version
    try:
        return _version("vortherm")
    except _PackageNotFoundError:  # imported from a source tree that was never installed
        return "0+unknown"


__version__ = _installed_version()
