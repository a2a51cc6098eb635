"""Plain data for JSON and YAML: dicts with string keys, lists, str, int, float, bool, None.

``to_plain(value)`` turns the values our results carry into that form, recursively:
dataclass instances become dicts (``dataclasses.asdict``), tuples become lists, dict keys
become strings, ``pathlib.Path`` becomes its text, numpy scalars and arrays become Python
numbers and lists (duck-typed through ``tolist``, so numpy is not imported here), and
complex numbers become ``[real, imag]``. Non-finite floats stay as they are (YAML writes
``.nan``); ``nonfinite_as_none=True`` turns them into ``None`` for strict JSON.
"""

from __future__ import annotations

import math
from dataclasses import asdict, is_dataclass
from pathlib import PurePath

__all__ = ["to_plain"]


def to_plain(value, *, nonfinite_as_none: bool = False):
    """``value`` as plain data (see the module docstring)."""
    if is_dataclass(value) and not isinstance(value, type):
        value = asdict(value)
    if isinstance(value, dict):
        return {str(k): to_plain(v, nonfinite_as_none=nonfinite_as_none)
                for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_plain(v, nonfinite_as_none=nonfinite_as_none) for v in value]
    if isinstance(value, PurePath):
        return str(value)
    if value is None or isinstance(value, (str, bytes, bool)):
        return value
    if isinstance(value, complex):
        return [to_plain(value.real, nonfinite_as_none=nonfinite_as_none),
                to_plain(value.imag, nonfinite_as_none=nonfinite_as_none)]
    if hasattr(value, "tolist"):                    # numpy scalar or array
        return to_plain(value.tolist(), nonfinite_as_none=nonfinite_as_none)
    if nonfinite_as_none and isinstance(value, float) and not math.isfinite(value):
        return None
    return value
