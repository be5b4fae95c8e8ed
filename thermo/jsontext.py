"""Strict JSON (RFC 8259) data: no NaN, no Infinity, only Python's own scalars.

The one converter every JSON writer of the project uses (gpe.run.jsontext adds the dump and
load helpers of the command line): a missing or non-finite number becomes ``null``.
"""

from __future__ import annotations

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
