"""The one JSON/YAML-safe converter (rigbench.base.jsonsafe) on the values results carry."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rigbench.base.jsonsafe import to_plain


@dataclass(frozen=True)
class _Pair:
    a: float
    b: tuple


def test_nested_values_become_plain_python():
    # common practice, no source: the result must survive json.dumps and keep its values
    value = {1: (np.float64(0.5), np.int64(3), np.bool_(True)), "p": Path("a/b.csv"),
             "z": 1 + 2j, "arr": np.array([[1.0, 2.0]]), "d": _Pair(0.25, (1, "x"))}
    out = to_plain(value)
    assert out == {"1": [0.5, 3, True], "p": "a/b.csv", "z": [1.0, 2.0],
                   "arr": [[1.0, 2.0]], "d": {"a": 0.25, "b": [1, "x"]}}
    assert type(out["1"][1]) is int and type(out["1"][2]) is bool
    json.dumps(out, allow_nan=False)


def test_non_finite_floats_kept_or_null():
    assert math.isnan(to_plain([np.float64("nan")])[0])
    assert to_plain({"x": float("inf"), "y": np.float32("nan")}, nonfinite_as_none=True) == \
        {"x": None, "y": None}
