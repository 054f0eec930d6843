"""Alignment units and sign conventions used by every form, import and report.

Conventions (DESIGN.md §3, ISO 8855 vehicle axes: x forward, y left, z up):

- angles are stored in degrees; lengths in mm; distances in km;
- **toe** per wheel: positive = toe-in (front of the wheel turned toward the vehicle centreline);
- **total toe** of an axle = toe_left + toe_right (ISO 8855);
- **linear toe** per wheel ``x = D·sin(θ)`` at a reference diameter ``D`` (rim or tyre outside
  diameter — the vehicle's data says which, so ``D`` is always an argument);
- **thrust angle** = ``(toe_RL − toe_RR) / 2``; positive = the thrust line points to the **right**
  of the geometric centreline. Manuals disagree on this sign: show it wherever it is shown;
- **cross-camber** = camber_left − camber_right; **cross-caster** = caster_left − caster_right.

The numeric functions accept scalars or arrays of any shape (broadcast elementwise) and return
floats for scalar input, arrays otherwise. Bad input raises ``ValueError`` naming the argument.
"""
from __future__ import annotations

import math
import re

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "KM_PER_MILE",
    "MM_PER_INCH",
    "THRUST_ANGLE_CONVENTION",
    "CROSS_CONVENTION",
    "toe_from_linear",
    "linear_from_toe",
    "total_toe",
    "total_linear_from_toe",
    "thrust_angle",
    "cross_camber",
    "cross_caster",
    "mm_from_inches",
    "inches_from_mm",
    "km_from_miles",
    "miles_from_km",
    "deg_to_dm",
    "dm_to_deg",
    "parse_angle",
    "format_angle",
]

KM_PER_MILE = 1.609344  # international mile, exact by definition (1959 agreement)
MM_PER_INCH = 25.4  # international inch, exact by definition

THRUST_ANGLE_CONVENTION = (
    "thrust angle = (toe RL − toe RR) / 2; positive = thrust line points right of the "
    "geometric centreline"
)
CROSS_CONVENTION = "cross-camber / cross-caster = left − right"


def _as_float_array(name: str, value: ArrayLike) -> np.ndarray:
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: must be a number or an array of numbers") from None
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name}: must be finite")
    return arr


def _out(arr: np.ndarray) -> float | np.ndarray:
    return float(arr) if arr.ndim == 0 else arr


def toe_from_linear(x_mm: ArrayLike, diameter_mm: ArrayLike) -> float | np.ndarray:
    """Toe angle per wheel (deg) from linear toe ``x_mm`` (mm) at reference diameter (mm).

    ``θ = asin(x / D)``; positive = toe-in. Shapes broadcast.
    """
    x = _as_float_array("x_mm", x_mm)
    d = _as_float_array("diameter_mm", diameter_mm)
    if np.any(d <= 0):
        raise ValueError("diameter_mm: must be positive")
    if np.any(np.abs(x) > d):
        raise ValueError("x_mm: linear toe cannot exceed the reference diameter")
    return _out(np.degrees(np.arcsin(x / d)))


def linear_from_toe(toe_deg: ArrayLike, diameter_mm: ArrayLike) -> float | np.ndarray:
    """Linear toe per wheel (mm) ``x = D·sin(θ)`` from toe (deg) at reference diameter (mm)."""
    t = _as_float_array("toe_deg", toe_deg)
    d = _as_float_array("diameter_mm", diameter_mm)
    if np.any(d <= 0):
        raise ValueError("diameter_mm: must be positive")
    if np.any(np.abs(t) >= 90):
        raise ValueError("toe_deg: must lie strictly between −90° and 90°")
    return _out(d * np.sin(np.radians(t)))


def total_toe(toe_left_deg: ArrayLike, toe_right_deg: ArrayLike) -> float | np.ndarray:
    """Total toe of an axle (deg) = left + right (ISO 8855); positive = toe-in."""
    return _out(_as_float_array("toe_left_deg", toe_left_deg)
                + _as_float_array("toe_right_deg", toe_right_deg))


def total_linear_from_toe(total_toe_deg: ArrayLike, diameter_mm: ArrayLike) -> float | np.ndarray:
    """Total linear toe (mm) of an axle from its total toe angle (deg).

    The total angle is shared equally by the two wheels, each contributing ``D·sin(θ/2)``, so
    the total is ``2·D·sin(θ_total / 2)``.
    """
    t = _as_float_array("total_toe_deg", total_toe_deg)
    per_wheel = linear_from_toe(t / 2.0, diameter_mm)
    return _out(2.0 * np.asarray(per_wheel))


def thrust_angle(toe_rl_deg: ArrayLike, toe_rr_deg: ArrayLike) -> float | np.ndarray:
    """Thrust angle (deg) = (toe_RL − toe_RR)/2.

    Positive = the thrust line points to the right of the geometric centreline (a rear-left wheel
    toed in more than the rear-right pushes the car's tail left and its nose right).
    """
    return _out((_as_float_array("toe_rl_deg", toe_rl_deg)
                 - _as_float_array("toe_rr_deg", toe_rr_deg)) / 2.0)


def cross_camber(camber_left_deg: ArrayLike, camber_right_deg: ArrayLike) -> float | np.ndarray:
    """Cross-camber (deg) = camber_left − camber_right."""
    return _out(_as_float_array("camber_left_deg", camber_left_deg)
                - _as_float_array("camber_right_deg", camber_right_deg))


def cross_caster(caster_left_deg: ArrayLike, caster_right_deg: ArrayLike) -> float | np.ndarray:
    """Cross-caster (deg) = caster_left − caster_right."""
    return _out(_as_float_array("caster_left_deg", caster_left_deg)
                - _as_float_array("caster_right_deg", caster_right_deg))


def mm_from_inches(inches: ArrayLike) -> float | np.ndarray:
    """Inches → mm (25.4 mm per inch)."""
    return _out(_as_float_array("inches", inches) * MM_PER_INCH)


def inches_from_mm(mm: ArrayLike) -> float | np.ndarray:
    """mm → inches."""
    return _out(_as_float_array("mm", mm) / MM_PER_INCH)


def km_from_miles(miles: ArrayLike) -> float | np.ndarray:
    """Miles → km (international mile). Negative distances are refused."""
    m = _as_float_array("miles", miles)
    if np.any(m < 0):
        raise ValueError("miles: must not be negative")
    return _out(m * KM_PER_MILE)


def miles_from_km(km: ArrayLike) -> float | np.ndarray:
    """km → miles (international mile). Negative distances are refused."""
    k = _as_float_array("km", km)
    if np.any(k < 0):
        raise ValueError("km: must not be negative")
    return _out(k / KM_PER_MILE)


def deg_to_dm(deg: float) -> tuple[int, int, float]:
    """Split an angle (deg) into ``(sign, whole degrees, minutes)``; sign is +1 or −1.

    ``deg_to_dm(-0.2) == (-1, 0, 12.0)``. Minutes lie in [0, 60).
    """
    value = float(_as_float_array("deg", deg))
    sign = -1 if value < 0 else 1
    a = abs(value)
    whole = int(math.floor(a))
    minutes = (a - whole) * 60.0
    if minutes >= 60.0 - 1e-9:  # guard rounding just below a whole degree
        whole, minutes = whole + 1, 0.0
    return sign, whole, minutes


def dm_to_deg(sign: int, degrees: int, minutes: float) -> float:
    """Join ``(sign, whole degrees ≥ 0, minutes in [0, 60))`` into degrees."""
    if sign not in (1, -1):
        raise ValueError("sign: must be +1 or -1")
    d = float(_as_float_array("degrees", degrees))
    m = float(_as_float_array("minutes", minutes))
    if d < 0 or d != math.floor(d):
        raise ValueError("degrees: must be a whole number ≥ 0")
    if not 0 <= m < 60:
        raise ValueError("minutes: must lie in [0, 60)")
    return sign * (d + m / 60.0)


_ANGLE_DM = re.compile(
    r"^\s*(?P<sign>[-+−]?)\s*(?:(?P<deg>\d+(?:\.\d+)?)\s*°)?\s*"
    r"(?:(?P<min>\d+(?:\.\d+)?)\s*['′])?\s*$"
)
_ANGLE_DEC = re.compile(r"^\s*(?P<val>[-+−]?\d+(?:\.\d+)?|[-+−]?\.\d+)\s*°?\s*$")


def parse_angle(text: str) -> float:
    """Read an angle typed by a technician; returns degrees.

    Accepts decimal degrees (``"0.25"``, ``"-0.25°"``) or degrees and minutes (``"0°12'"``,
    ``"-1° 30′"``, ``"12'"``). The sign applies to the whole angle.
    """
    if not isinstance(text, str):
        raise ValueError("angle: must be text")
    m = _ANGLE_DEC.match(text)
    if m:
        return float(m.group("val").replace("−", "-"))
    m = _ANGLE_DM.match(text)
    if not m or (m.group("deg") is None and m.group("min") is None):
        raise ValueError(f"angle: cannot read {text!r} as degrees or degrees and minutes")
    deg = float(m.group("deg") or 0.0)
    minutes = float(m.group("min") or 0.0)
    if minutes >= 60:
        raise ValueError(f"angle: minutes must be below 60 in {text!r}")
    sign = -1.0 if m.group("sign") in ("-", "−") else 1.0
    return sign * (deg + minutes / 60.0)


def format_angle(deg: float, style: str = "dm", decimals: int = 0) -> str:
    """Format an angle (deg) as ``"-0°12'"`` (style ``"dm"``) or ``"-0.20°"`` (style ``"deg"``).

    ``decimals`` is the number of decimals of the minutes (dm) or degrees (deg).
    ``parse_angle(format_angle(a))`` returns ``a`` to the shown precision.
    """
    if style not in ("dm", "deg"):
        raise ValueError("style: must be 'dm' or 'deg'")
    if not isinstance(decimals, int) or decimals < 0:
        raise ValueError("decimals: must be a whole number ≥ 0")
    value = float(_as_float_array("deg", deg))
    if style == "deg":
        text = f"{value:.{decimals}f}°"
        return text if text.lstrip("-").strip("0.°") else text.lstrip("-")
    sign, whole, minutes = deg_to_dm(value)
    minutes = round(minutes, decimals)
    if minutes >= 60:
        whole, minutes = whole + 1, 0.0
    sign_text = "-" if sign < 0 and (whole or minutes) else ""
    return f"{sign_text}{whole}°{minutes:.{decimals}f}'"
