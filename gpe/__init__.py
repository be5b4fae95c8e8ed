"""The field side of vortherm: 2D Gross-Pitaevskii simulation of stirred condensates.

Submodules are imported on demand so that ``import gpe`` stays fast.
"""

__version__ = "0.1.0"
