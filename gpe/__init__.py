"""The field side of vortherm: 2D Gross-Pitaevskii simulation of stirred condensates.

Submodules are imported on demand so that ``import gpe`` stays fast.
"""

import os as _os
from importlib.metadata import PackageNotFoundError as _PackageNotFoundError
from importlib.metadata import version as _version

# numba's kernels and pyFFTW each bring an OpenMP runtime; their idle workers spin by default
# and steal the two cores from each other between split-step stages (measured: 5x slower steps
# at 512^2). Passive waiting must be chosen before either runtime loads; a user's own setting
# is kept. See gpe/field/kernels.py.
_os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")


def _installed_version() -> str:
    # the one version literal is pyproject.toml's; the installed metadata carries it
    try:
        return _version("vortherm")
    except _PackageNotFoundError:  # imported from a source tree that was never installed
        return "0+unknown"


__version__ = _installed_version()
