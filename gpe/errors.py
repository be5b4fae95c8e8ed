"""Exception types of the ``gpe`` package.

Every message is written for a physicist: it names the file, the key (or row) and what would
be accepted.
"""


class VorthermError(Exception):
    """Base class of all errors raised on purpose by vortherm."""


class ProtocolError(VorthermError):
    """A protocol file or override is invalid (unknown key, bad unit, bad value)."""


class RunFileError(VorthermError):
    """A run file is missing, incomplete, of an unknown format version or inconsistent."""


class SimulationError(VorthermError):
    """The simulation cannot continue (non-finite field, diverging step)."""


class ProtocolWarning(UserWarning):
    """A protocol is valid but one of its numbers goes against common practice."""
