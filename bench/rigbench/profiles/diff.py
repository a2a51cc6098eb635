"""Comparing gain profiles: values equal to 7 significant digits, a row per parameter, and a
plain text table. Profiles are rigbench.profiles.model.Profile.
"""

from __future__ import annotations

from dataclasses import dataclass

from rigbench.wire.describe import format_value

__all__ = ["same_value", "DiffRow", "diff_profiles", "format_diff"]


def same_value(a: float, b: float, *, digits: int = 7) -> bool:
    """Equal to ``digits`` significant digits (parameters travel with 7, PROTOCOL.md §3).

    Allowed difference: one unit in the last of those digits (each side may be rounded by
    half a unit) plus the rounding of a board that stores float32 (relative 2**-24).
    """
    m = max(abs(a), abs(b))
    if m == 0.0:
        return True
    exponent = int(f"{m:.{digits - 1}e}".split("e")[1])
    return abs(a - b) <= 10.0 ** (exponent - digits + 1) + m * 2.0 ** -24


@dataclass(frozen=True)
class DiffRow:
    """One parameter compared: ``change`` is same, changed, unit, only_a or only_b."""

    name: str
    a: float | None
    b: float | None
    unit_a: str | None
    unit_b: str | None
    change: str

    @property
    def relative(self) -> float | None:
        """(b − a)/|a| when both are numbers in the same unit and a ≠ 0."""
        if self.change in ("same", "changed") and self.a:
            return (self.b - self.a) / abs(self.a)
        return None


def diff_profiles(a: Profile, b: Profile, *, digits: int = 7) -> list[DiffRow]:
    """Every setting of ``a`` then those only in ``b``, compared to ``digits`` digits."""
    sa, sb = a.settings(), b.settings()
    rows = []
    for name in [*sa, *(n for n in sb if n not in sa)]:
        x, y = sa.get(name), sb.get(name)
        if x is None or y is None:
            change = "only_b" if x is None else "only_a"
        elif x.unit != y.unit:
            change = "unit"
        else:
            change = "same" if same_value(x.value, y.value, digits=digits) else "changed"
        rows.append(DiffRow(name, x and x.value, y and y.value, x and x.unit, y and y.unit,
                            change))
    return rows


def format_diff(rows: list[DiffRow], *, a_label: str = "A", b_label: str = "B",
                changes_only: bool = False) -> str:
    """A plain text table: parameter, unit, A, B, change."""
    table = [("parameter", "unit", a_label, b_label, "change")]
    for r in rows:
        if changes_only and r.change == "same":
            continue
        unit = r.unit_a or r.unit_b or ""
        if r.change == "unit":
            unit = f"{r.unit_a} / {r.unit_b}"
        rel = r.relative
        change = {"same": "same", "only_a": f"only in {a_label}", "only_b": f"only in {b_label}",
                  "unit": "units differ"}.get(r.change) or (
                      f"{rel * 100:+.3g} %" if rel is not None else "changed")
        table.append((r.name, unit, "-" if r.a is None else format_value(r.a),
                      "-" if r.b is None else format_value(r.b), change))
    widths = [max(len(row[i]) for row in table) for i in range(5)]
    return "\n".join("  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip()
                     for row in table)
