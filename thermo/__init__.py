"""The vortex-gas side of vortherm: point-vortex statistical mechanics in bounded domains.

Never imports ``gpe``; depends only on numpy, scipy, numba and h5py.
"""

__version__ = "0.1.0"
