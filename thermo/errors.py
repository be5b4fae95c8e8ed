"""Exception types of the ``thermo`` package.

``thermo`` never imports ``gpe``, so it carries its own small hierarchy. Every message names
the offending vortex (row), parameter or value and says what would be accepted.
"""


class ThermoError(Exception):
    """Base class of all errors raised on purpose by ``thermo``."""


class ConfigurationError(ThermoError, ValueError):
    """A vortex configuration is unusable.

    Raised for wrong array shapes, non-finite coordinates, vortices outside the domain (or
    inside the hard core of the wall), two vortices closer than the hard core, and signs other
    than +1/-1. The message names the row(s) and what is accepted.
    """


class DomainError(ThermoError, ValueError):
    """A domain is specified with invalid parameters (e.g. a non-positive aspect ratio)."""


class SamplerError(ThermoError, ValueError):
    """Invalid Monte Carlo settings (ladder, sweep counts, core radius, vortex numbers)."""


class MeasuredTableError(ThermoError, ValueError):
    """A measured vortex table or its geometry cannot be read (``thermo.data.measured``,
    ``thermo.data.geometry``). The message names the file, line or key and what is accepted."""
