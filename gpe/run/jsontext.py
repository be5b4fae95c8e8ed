"""Strict JSON (RFC 8259): no NaN, no Infinity, only Python's own scalars.

Every JSON file or document the package writes goes through :func:`strict_json` (or
:func:`dumps_strict`, which also refuses anything left over), so that strict parsers
(JavaScript, ``jq``, ``json.loads(text, parse_constant=...)`` raising) accept it. A missing or
non-finite number is written as ``null``.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np


def strict_json(obj: Any) -> Any:
    """``obj`` made JSON-safe: non-finite floats become None, numpy scalars and arrays become
    Python numbers and lists, tuples become lists, mapping keys become strings.

    Units
    -----
    None; values are passed through unchanged apart from their type.
    """
    if isinstance(obj, dict):
        return {str(k): strict_json(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [strict_json(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return strict_json(obj.tolist())
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def dumps_strict(obj: Any, **kwargs: Any) -> str:
    """``json.dumps`` of :func:`strict_json` of ``obj`` with ``allow_nan=False``.

    Keyword arguments (``indent``, ``sort_keys``, ...) go to :func:`json.dumps`.

    Units
    -----
    None.
    """
    return json.dumps(strict_json(obj), allow_nan=False, **kwargs)


def _refuse_constant(name: str) -> None:
    raise ValueError(f"{name} is not JSON (RFC 8259); write null for a missing number")


def loads_strict(text: str) -> Any:
    """``json.loads`` that refuses ``NaN``, ``Infinity`` and ``-Infinity`` with a ValueError.

    Units
    -----
    None.
    """
    return json.loads(text, parse_constant=_refuse_constant)
