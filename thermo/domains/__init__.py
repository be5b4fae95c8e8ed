"""Bounded domains of the point-vortex gas, one module per shape.

:mod:`thermo.domains.base` holds the interface every domain implements and the compiled
loops shared by all of them; :mod:`thermo.domains.disk` and :mod:`thermo.domains.box` the two
shapes; :mod:`thermo.domains.kinds` finds the domain classes by their kind name. Import names
from the module that defines them.
"""
