"""Strict JSON: what strict_json maps and that loads_strict refuses what RFC 8259 forbids."""

import math

import numpy as np
import pytest

from gpe.run.jsontext import dumps_strict, loads_strict
from thermo.jsontext import strict_json


def test_non_finite_become_null_and_numpy_becomes_python():
    obj = {"a": math.nan, "b": [np.float64(np.inf), -math.inf, np.float32(1.5)],
           "c": (np.int64(3), np.bool_(True)), 4: np.array([1.0, np.nan])}
    out = strict_json(obj)
    assert out == {"a": None, "b": [None, None, 1.5], "c": [3, True], "4": [1.0, None]}
    assert type(out["c"][0]) is int and type(out["c"][1]) is bool
    # [exact] RFC 8259 section 6: numeric values such as Infinity and NaN are not permitted
    text = dumps_strict(obj, indent=1)
    assert "NaN" not in text and "Infinity" not in text
    assert loads_strict(text) == out


def test_loads_strict_refuses_nan_and_infinity():
    for bad in ('{"x": NaN}', "[Infinity]", "[-Infinity]"):
        with pytest.raises(ValueError, match="not JSON"):
            loads_strict(bad)


def test_dumps_strict_refuses_what_it_cannot_map():
    with pytest.raises(TypeError):
        dumps_strict({"x": object()})
