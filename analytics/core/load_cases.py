"""Load cases per corner from a platform's data (DESIGN.md §5).

Inputs are static **axle loads in N** (use :func:`axle_load_N_from_kg` for kg), track, wheelbase,
CG height and loaded tyre radius in mm, the brake balance (front fraction of the braking force)
and the driven axle. Outputs are contact-patch forces ``(4, 3)`` in N, vehicle axes ISO 8855
(x forward, y left, z up), corners in the order :data:`CORNERS` = FL, FR, RL, RR.

Model (steady state, rigid body on a flat road; each simplification is stated as an assumption):

- cornering at lateral acceleration ``a_y``: each axle carries the lateral force of its own static
  load, ``W_axle·a_y/g``; its lateral load transfer is ``W_axle·(a_y/g)·h/track`` (roll stiffness
  shared in proportion to axle load); the axle's lateral force is shared between its wheels in
  proportion to their vertical loads. The outer side is given explicitly; all lateral tyre forces
  point toward the turn centre (the inner side);
- braking at deceleration ``a_x``: total force ``M·a_x`` split by the brake balance, equal left
  and right (equal line pressure); longitudinal load transfer ``M·a_x·h/wheelbase`` from rear to
  front. **A braking force acts at the contact patch** (outboard brakes: the caliper torque is
  reacted by the carrier);
- lift-off: a rearward force ``M·a_x`` (engine braking) on the driven axle only (shared by axle
  load when both are driven), with its load transfer. It is applied at the contact patch as §5
  says; with a body-mounted final drive the torque is reacted through the drive shafts;
- braking in a turn: both of the above together (lateral force from the axle's dynamic load).

The design pose of a corner is taken as the static pose: compliance sees ``delta_forces_N``, the
change from standing still.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "G_MPS2",
    "CORNERS",
    "DEFAULT_LATERAL_G",
    "DEFAULT_BRAKING_G",
    "DEFAULT_LIFTOFF_G",
    "Platform",
    "Assumption",
    "LoadCase",
    "axle_load_N_from_kg",
    "static_loads",
    "cornering",
    "braking",
    "lift_off",
    "braking_in_turn",
    "vehicle_load_cases",
]

G_MPS2 = 9.80665  # standard gravity (CGPM 1901), m/s²
CORNERS = ("FL", "FR", "RL", "RR")
DEFAULT_LATERAL_G = 0.5  # assumption (DESIGN.md §5 default)
DEFAULT_BRAKING_G = 0.6  # assumption (DESIGN.md §5 default)
DEFAULT_LIFTOFF_G = 0.15  # assumption (DESIGN.md §5 default)
_LEFT = np.array([True, False, True, False])
_FRONT = np.array([True, True, False, False])


def axle_load_N_from_kg(mass_kg: float) -> float:
    """Static axle load (N) from the axle's mass on the scales (kg)."""
    m = float(mass_kg)
    if not np.isfinite(m) or m <= 0:
        raise ValueError("mass_kg: must be a positive number")
    return m * G_MPS2


@dataclass(frozen=True)
class Platform:
    """A vehicle platform's numbers for load cases (N, mm, fractions).

    ``brake_balance_front``: fraction (0–1) of the braking force on the front axle.
    ``driven_axle``: "front", "rear" or "both".
    """

    front_axle_load_N: float
    rear_axle_load_N: float
    track_front_mm: float
    track_rear_mm: float
    wheelbase_mm: float
    cg_height_mm: float
    tyre_radius_mm: float
    brake_balance_front: float
    driven_axle: str

    def __post_init__(self) -> None:
        for name in ("front_axle_load_N", "rear_axle_load_N", "track_front_mm", "track_rear_mm",
                     "wheelbase_mm", "cg_height_mm", "tyre_radius_mm"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int | float) or not np.isfinite(v) or v <= 0:
                raise ValueError(f"{name}: must be a positive number")
        b = self.brake_balance_front
        if isinstance(b, bool) or not isinstance(b, int | float) or not 0 <= b <= 1:
            raise ValueError("brake_balance_front: must be a fraction between 0 and 1")
        if self.driven_axle not in ("front", "rear", "both"):
            raise ValueError("driven_axle: must be 'front', 'rear' or 'both'")

    @property
    def weight_N(self) -> float:
        return self.front_axle_load_N + self.rear_axle_load_N


@dataclass(frozen=True)
class Assumption:
    """One stated assumption of a load case, e.g. lateral acceleration 0.5 g (default)."""

    name: str
    value: float | str
    unit: str
    is_default: bool

    def __str__(self) -> str:
        unit = f" {self.unit}" if self.unit else ""
        return f"{self.name}: {self.value}{unit}{' (default)' if self.is_default else ''}"


@dataclass(frozen=True, eq=False)
class LoadCase:
    """Contact-patch forces of one load case for the four corners.

    Attributes:
        name: "cornering", "braking", "lift-off" or "braking in a turn".
        forces_N: (4, 3) total contact-patch force per corner (FL, FR, RL, RR), N.
        static_forces_N: (4, 3) the same standing still.
        assumptions: what was assumed (accelerations, outer side, sharing rules).
        acts_at: where the forces act on the carrier: "contact patch".
        wheel_lift: corners whose vertical load would fall below zero (clipped to 0).
    """

    name: str
    forces_N: np.ndarray
    static_forces_N: np.ndarray
    assumptions: tuple[Assumption, ...]
    acts_at: str = "contact patch"
    wheel_lift: tuple[str, ...] = ()

    @property
    def delta_forces_N(self) -> np.ndarray:
        """(4, 3) change from standing still — what the compliance model sees (N)."""
        return self.forces_N - self.static_forces_N

    def force(self, corner: str) -> np.ndarray:
        """(3,) total force at the named corner (FL, FR, RL, RR)."""
        return self.forces_N[_corner_index(corner)]

    def delta_force(self, corner: str) -> np.ndarray:
        """(3,) change from standing still at the named corner."""
        return self.delta_forces_N[_corner_index(corner)]

    def assumption_lines(self) -> list[str]:
        """Lines for screens: "lateral acceleration: 0.5 g (default)", …"""
        return [str(a) for a in self.assumptions]


def _corner_index(corner: str) -> int:
    if corner not in CORNERS:
        raise ValueError(f"corner: must be one of {', '.join(CORNERS)}")
    return CORNERS.index(corner)


def _accel(name: str, value: float | None, default: float) -> tuple[float, Assumption]:
    is_default = value is None
    v = default if is_default else value
    if isinstance(v, bool) or not isinstance(v, int | float) or not np.isfinite(v) or v < 0 or v > 2:
        raise ValueError(f"{name}: must be an acceleration between 0 and 2 g")
    return float(v), Assumption(name, float(v), "g", is_default)


def static_loads(platform: Platform) -> np.ndarray:
    """(4, 3) static contact-patch forces: half of each axle load per wheel, upward (N)."""
    f = np.zeros((4, 3))
    f[:, 2] = np.where(_FRONT, platform.front_axle_load_N, platform.rear_axle_load_N) / 2.0
    return f


def _outer(outer_side: str) -> np.ndarray:
    if outer_side not in ("left", "right"):
        raise ValueError("outer_side: must be 'left' or 'right' (the side away from the turn)")
    return _LEFT if outer_side == "left" else ~_LEFT


def _longitudinal(platform: Platform, ax_g: float, front_share: float) -> tuple[np.ndarray, np.ndarray]:
    """Fx (4,) rearward force of deceleration ax_g shared front_share:1−front_share; ΔFz (4,)."""
    total = platform.weight_N * ax_g
    fx = -np.where(_FRONT, front_share, 1.0 - front_share) * total / 2.0
    transfer = total * platform.cg_height_mm / platform.wheelbase_mm
    dfz = np.where(_FRONT, transfer, -transfer) / 2.0
    return fx, dfz


def _lateral(platform: Platform, ay_g: float, outer: np.ndarray,
             fz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fy (4,) toward the turn centre and the lateral-transfer-adjusted Fz (4,)."""
    sign = -1.0 if outer[0] else 1.0  # toward the turn centre: −y when the left side is outer
    axle_load = np.where(_FRONT, fz[0] + fz[1], fz[2] + fz[3])
    track = np.where(_FRONT, platform.track_front_mm, platform.track_rear_mm)
    transfer = axle_load * ay_g * platform.cg_height_mm / track
    fz_new = fz + np.where(outer, transfer, -transfer)
    fz_new = np.maximum(fz_new, 0.0)
    share = fz_new / np.where(_FRONT, fz_new[0] + fz_new[1], fz_new[2] + fz_new[3])
    fy = sign * axle_load * ay_g * share
    return fy, fz_new


def _case(name, platform, fx, fy, fz, assumptions, lift=()) -> LoadCase:
    f = np.stack([fx, fy, fz], axis=1)
    f.setflags(write=False)
    s = static_loads(platform)
    s.setflags(write=False)
    return LoadCase(name=name, forces_N=f, static_forces_N=s, assumptions=tuple(assumptions),
                    wheel_lift=tuple(lift))


def _lift(fz: np.ndarray) -> tuple[str, ...]:
    return tuple(c for c, v in zip(CORNERS, fz, strict=True) if v <= 0.0)


def cornering(platform: Platform, *, outer_side: str, lateral_g: float | None = None) -> LoadCase:
    """Steady cornering (default 0.5 g); ``outer_side`` is the side away from the turn centre."""
    ay, a_ay = _accel("lateral acceleration", lateral_g, DEFAULT_LATERAL_G)
    outer = _outer(outer_side)
    fz0 = static_loads(platform)[:, 2]
    fy, fz = _lateral(platform, ay, outer, fz0)
    return _case("cornering", platform, np.zeros(4), fy, fz, [
        a_ay, Assumption("outer side", outer_side, "", False),
        Assumption("lateral load transfer", "by axle load, CG height / track", "", True),
    ], _lift(fz))


def braking(platform: Platform, *, braking_g: float | None = None) -> LoadCase:
    """Straight-line braking (default 0.6 g) with the platform's brake balance."""
    ax, a_ax = _accel("deceleration", braking_g, DEFAULT_BRAKING_G)
    fx, dfz = _longitudinal(platform, ax, platform.brake_balance_front)
    fz = np.maximum(static_loads(platform)[:, 2] + dfz, 0.0)
    return _case("braking", platform, fx, np.zeros(4), fz, [
        a_ax, Assumption("brake balance front", platform.brake_balance_front, "", False),
        Assumption("braking force acts at", "contact patch", "", True),
    ], _lift(fz))


def lift_off(platform: Platform, *, liftoff_g: float | None = None) -> LoadCase:
    """Lift-off: engine braking (default 0.15 g) on the driven axle, rearward."""
    ax, a_ax = _accel("engine-braking deceleration", liftoff_g, DEFAULT_LIFTOFF_G)
    share = {"front": 1.0, "rear": 0.0,
             "both": platform.front_axle_load_N / platform.weight_N}[platform.driven_axle]
    fx, dfz = _longitudinal(platform, ax, share)
    fz = np.maximum(static_loads(platform)[:, 2] + dfz, 0.0)
    return _case("lift-off", platform, fx, np.zeros(4), fz, [
        a_ax, Assumption("driven axle", platform.driven_axle, "", False),
        Assumption("engine-braking force acts at", "contact patch", "", True),
    ], _lift(fz))


def braking_in_turn(platform: Platform, *, outer_side: str, lateral_g: float | None = None,
                    braking_g: float | None = None) -> LoadCase:
    """Braking (default 0.6 g) and cornering (default 0.5 g) together."""
    ay, a_ay = _accel("lateral acceleration", lateral_g, DEFAULT_LATERAL_G)
    ax, a_ax = _accel("deceleration", braking_g, DEFAULT_BRAKING_G)
    outer = _outer(outer_side)
    fx, dfz = _longitudinal(platform, ax, platform.brake_balance_front)
    fz_long = np.maximum(static_loads(platform)[:, 2] + dfz, 0.0)
    fy, fz = _lateral(platform, ay, outer, fz_long)
    return _case("braking in a turn", platform, fx, fy, fz, [
        a_ay, a_ax, Assumption("outer side", outer_side, "", False),
        Assumption("brake balance front", platform.brake_balance_front, "", False),
        Assumption("braking force acts at", "contact patch", "", True),
    ], _lift(fz))


def vehicle_load_cases(platform: Platform, *, outer_side: str, lateral_g: float | None = None,
                       braking_g: float | None = None, liftoff_g: float | None = None
                       ) -> tuple[LoadCase, ...]:
    """The four cases of DESIGN.md §5: cornering, braking, lift-off, braking in a turn."""
    return (
        cornering(platform, outer_side=outer_side, lateral_g=lateral_g),
        braking(platform, braking_g=braking_g),
        lift_off(platform, liftoff_g=liftoff_g),
        braking_in_turn(platform, outer_side=outer_side, lateral_g=lateral_g, braking_g=braking_g),
    )
