"""One measured point of a frequency response: G(jω) = gain·e^{j·phase} at ω.

Shared by the relay analysis (which measures it) and the tuning rules (which design from
it). Phase in degrees, frequency in rad/s. No conversion of units happens here: the gain
is in (output unit)/(input unit) of whatever signals were analysed.
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass

__all__ = ["FrequencyPoint", "wrap_phase_deg"]


def wrap_phase_deg(phase_deg: float, *, centre_deg: float = -180.0) -> float:
    """Wrap a phase into the 360° window centred on ``centre_deg`` (default (−360, 0])."""
    low = centre_deg - 180.0
    wrapped = (phase_deg - low) % 360.0 + low
    if wrapped == low:  # keep the window half-open on the low side
        wrapped += 360.0
    return wrapped


@dataclass(frozen=True)
class FrequencyPoint:
    """G(jω) at one frequency: ``gain`` (ratio), ``phase_deg`` and ``omega_rad_s``."""

    gain: float
    phase_deg: float
    omega_rad_s: float

    @property
    def period_s(self) -> float:
        return 2.0 * math.pi / self.omega_rad_s

    @property
    def value(self) -> complex:
        """The point as a complex number."""
        return cmath.rect(self.gain, math.radians(self.phase_deg))

    @classmethod
    def from_complex(cls, value: complex, omega_rad_s: float, *,
                     centre_deg: float = -180.0) -> "FrequencyPoint":
        """Build from a complex value; phase wrapped around ``centre_deg`` (default −180°)."""
        phase = wrap_phase_deg(math.degrees(cmath.phase(value)), centre_deg=centre_deg)
        return cls(gain=abs(value), phase_deg=phase, omega_rad_s=float(omega_rad_s))
