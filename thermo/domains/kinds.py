"""Lookup of the domain classes by their kind name, discovered from this package.

Every module of :mod:`thermo.domains` is imported once and the concrete subclasses of
:class:`~thermo.domains.base.Domain` it defines are collected under their ``kind``, so that a
new shape is one new module here and nothing else to register.

Units: none (names only).
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
from functools import cache
from pathlib import Path

from thermo.domains.base import Domain
from thermo.errors import DomainError

_PACKAGE = __name__.rpartition(".")[0]
_PACKAGE_DIR = Path(__file__).resolve().parent


@cache
def domain_classes() -> dict[str, type[Domain]]:
    """Every concrete domain class of :mod:`thermo.domains`, by kind name (sorted).

    Returns
    -------
    dict
        kind name -> class.

    Raises
    ------
    DomainError
        If two classes claim the same kind, or one has no kind.

    Units: none.
    """
    found: dict[str, type[Domain]] = {}
    for info in pkgutil.iter_modules([str(_PACKAGE_DIR)]):
        # imported here, not at the top: the modules to import are those found in the package
        # directory, which is what makes a new domain module known without listing it anywhere
        module = importlib.import_module(f"{_PACKAGE}.{info.name}")
        for _, cls in inspect.getmembers(module, inspect.isclass):
            if (cls.__module__ != module.__name__ or not issubclass(cls, Domain)
                    or inspect.isabstract(cls)):
                continue
            if not cls.kind:
                raise DomainError(f"domain class {cls.__qualname__} in {module.__name__} sets "
                                  "no kind name")
            if cls.kind in found:
                raise DomainError(
                    f"domain kind {cls.kind!r} is claimed by both {found[cls.kind].__module__}."
                    f"{found[cls.kind].__qualname__} and {module.__name__}.{cls.__qualname__}")
            found[cls.kind] = cls
    return dict(sorted(found.items()))


def domain_class(kind: str) -> type[Domain]:
    """The domain class of a kind name ("disk", "box", ...).

    Raises
    ------
    DomainError
        If no domain has that kind; the message lists the accepted kinds.

    Units: none.
    """
    classes = domain_classes()
    try:
        return classes[kind]
    except (KeyError, TypeError):
        accepted = ", ".join(repr(k) for k in classes)
        raise DomainError(f"domain kind {kind!r} is not known; accepted: {accepted}") from None
