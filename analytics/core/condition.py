"""From an inspection to the corner model, and the what-if of measured against new.

- A measured bush deflection ``d`` (mm) under a stated force ``P`` (N) gives the link's stiffness
  ``P / d`` (N/mm). **Assumption**: the measurement loads that link along its own line, so ``d`` is
  the deflection of the link's bushes in series (:data:`DEFLECTION_ASSUMPTION`).
- A finding without a measurement scales the new stiffness by a factor from the one table
  :data:`FINDING_STIFFNESS_FACTORS` — **assumptions, from memory**, shown wherever used.
- A ball joint's measured play (mm) becomes the link's ``play_mm``.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

from .compliance import load_response_many, stability_verdicts
from .corner_file import Corner, with_links
from .load_cases import CORNERS, LoadCase

__all__ = [
    "FINDING_STIFFNESS_FACTORS",
    "FINDINGS_NOTE",
    "DEFLECTION_ASSUMPTION",
    "LinkCondition",
    "stiffness_from_deflection",
    "stiffness_factor",
    "play_from_ball_joint",
    "measured_corner",
    "WhatIfRow",
    "WhatIf",
    "what_if",
    "what_if_many",
]

# Stiffness factor (measured ÷ new) for a bush finding without a measurement.
# Assumption, from memory: not from a published source; shown as such on every screen using it.
FINDING_STIFFNESS_FACTORS: Mapping[str, float] = MappingProxyType({
    "none": 1.0,
    "cracking": 0.8,
    "dust cover damaged": 1.0,  # no stiffness loss of itself; the part is flagged for wear
    "rubber displaced": 0.5,
    "fluid leak": 0.4,  # a hydraulically damped bush that has lost its fluid
    "debonding/separation": 0.3,
})
FINDINGS_NOTE = "stiffness factors per finding are assumptions, from memory (no published source)"
DEFLECTION_ASSUMPTION = (
    "stiffness = force / deflection assumes the test force loads the link along its own line"
)
_ALIASES = {"debonding": "debonding/separation", "separation": "debonding/separation"}


def stiffness_from_deflection(force_N: float | np.ndarray, deflection_mm: float | np.ndarray
                              ) -> float | np.ndarray:
    """Link stiffness (N/mm) = P / d from a test force P (N) and measured deflection d (mm).

    See :data:`DEFLECTION_ASSUMPTION`. Both must be positive and finite; shapes broadcast.
    """
    p = np.asarray(force_N, dtype=float)
    d = np.asarray(deflection_mm, dtype=float)
    if not np.all(np.isfinite(p)) or np.any(p <= 0):
        raise ValueError("force_N: must be a positive number")
    if not np.all(np.isfinite(d)) or np.any(d <= 0):
        raise ValueError("deflection_mm: must be a positive number")
    k = p / d
    return float(k) if k.ndim == 0 else k


def stiffness_factor(finding: str) -> float:
    """Factor (measured ÷ new stiffness) for a finding — see :data:`FINDING_STIFFNESS_FACTORS`."""
    key = _ALIASES.get(str(finding).strip().lower(), str(finding).strip().lower())
    if key not in FINDING_STIFFNESS_FACTORS:
        raise ValueError(
            f"finding: unknown {finding!r} (known: {', '.join(FINDING_STIFFNESS_FACTORS)})")
    return FINDING_STIFFNESS_FACTORS[key]


def play_from_ball_joint(play_mm: float) -> float:
    """A ball joint's measured total free play (mm) as the link's ``play_mm`` (must be ≥ 0)."""
    p = float(play_mm)
    if not np.isfinite(p) or p < 0:
        raise ValueError("play_mm: must be a number ≥ 0")
    return p


@dataclass(frozen=True)
class LinkCondition:
    """What the inspection found on one link.

    Give a measurement (``test_force_N`` and ``deflection_mm``) or a ``finding``; a measurement
    wins when both are given. ``ball_joint_play_mm`` sets the link's play.
    """

    test_force_N: float | None = None
    deflection_mm: float | None = None
    finding: str | None = None
    ball_joint_play_mm: float | None = None


def measured_corner(corner_new: Corner, conditions: Mapping[str, LinkCondition]) -> Corner:
    """The corner in its measured state: ``conditions`` maps link names to what was found."""
    stiffness: dict[str, float] = {}
    play: dict[str, float] = {}
    for name, cond in conditions.items():
        i = corner_new.link_index(name)
        if (cond.test_force_N is None) != (cond.deflection_mm is None):
            raise ValueError(f"{name}: give both test_force_N and deflection_mm, or neither")
        if cond.test_force_N is not None:
            stiffness[name] = float(stiffness_from_deflection(cond.test_force_N, cond.deflection_mm))
        elif cond.finding is not None:
            stiffness[name] = float(corner_new.stiffness[i]) * stiffness_factor(cond.finding)
        if cond.ball_joint_play_mm is not None:
            play[name] = play_from_ball_joint(cond.ball_joint_play_mm)
    return with_links(corner_new, stiffness=stiffness or None, play=play or None,
                      name=f"{corner_new.name} (measured)")


@dataclass(frozen=True)
class WhatIfRow:
    """One load case: compliance changes (deg) new against measured, with ± play bands."""

    case: str
    toe_change_new_deg: float
    toe_change_measured_deg: float
    camber_change_new_deg: float
    camber_change_measured_deg: float
    toe_band_new_deg: float
    toe_band_measured_deg: float
    camber_band_new_deg: float
    camber_band_measured_deg: float
    assumptions: tuple[str, ...]

    @property
    def toe_difference_deg(self) -> float:
        return self.toe_change_measured_deg - self.toe_change_new_deg

    @property
    def camber_difference_deg(self) -> float:
        return self.camber_change_measured_deg - self.camber_change_new_deg


@dataclass(frozen=True)
class WhatIf:
    """Measured state against new for one corner position over several load cases.

    ``stability_new`` / ``stability_measured``: the outer-rear verdicts (rear positions only).
    """

    position: str
    rows: tuple[WhatIfRow, ...]
    stability_new: str | None
    stability_measured: str | None
    notes: tuple[str, ...]


def what_if(corner_new: Corner, corner_measured: Corner, load_cases: Sequence[LoadCase], *,
            position: str) -> WhatIf:
    """Compare toe/camber changes under each load case, new corner against measured corner.

    ``position``: FL, FR, RL or RR — which force of each load case acts on this corner; the
    forces used are the changes from standing still (``LoadCase.delta_force``).
    """
    return what_if_many(corner_new, [corner_measured], load_cases, position=position)[0]


def what_if_many(corner_new: Corner, measured: Sequence[Corner], load_cases: Sequence[LoadCase],
                 *, position: str) -> list[WhatIf]:
    """:func:`what_if` of one new corner against many measured states, worked out together (the
    states of one geometry share its line matrix; the new corner's side is computed once)."""
    if position not in CORNERS:
        raise ValueError(f"position: must be one of {', '.join(CORNERS)}")
    expected_side = "left" if position.endswith("L") else "right"
    for label, c in (("corner_new", corner_new), *(("corner_measured", m) for m in measured)):
        if c.side != expected_side:
            raise ValueError(f"{label}: is a {c.side} corner but position {position} is {expected_side}")
    for m in measured:
        if corner_new.link_names != m.link_names:
            raise ValueError("corner_measured: must have the same links as corner_new")
    forces = np.array([lc.delta_force(position) for lc in load_cases]).reshape(-1, 3)
    res = load_response_many([corner_new, *measured], forces)
    assumptions = [tuple(lc.assumption_lines()) for lc in load_cases]
    sn = None
    sm: list[str | None] = [None] * len(measured)
    if position.startswith("R"):
        verdicts = stability_verdicts([corner_new, *measured])
        sn, sm = verdicts[0].note, [v.note for v in verdicts[1:]]
    tn, cn = res.toe_change_deg[0].tolist(), res.camber_change_deg[0].tolist()
    tbn, cbn = float(res.toe_band_deg[0]), float(res.camber_band_deg[0])
    out = []
    for k in range(len(measured)):
        tm, cm = res.toe_change_deg[k + 1].tolist(), res.camber_change_deg[k + 1].tolist()
        tbm, cbm = float(res.toe_band_deg[k + 1]), float(res.camber_band_deg[k + 1])
        rows = tuple(
            WhatIfRow(
                case=lc.name, toe_change_new_deg=tn[i], toe_change_measured_deg=tm[i],
                camber_change_new_deg=cn[i], camber_change_measured_deg=cm[i],
                toe_band_new_deg=tbn, toe_band_measured_deg=tbm,
                camber_band_new_deg=cbn, camber_band_measured_deg=cbm,
                assumptions=assumptions[i],
            )
            for i, lc in enumerate(load_cases)
        )
        out.append(WhatIf(position=position, rows=rows, stability_new=sn, stability_measured=sm[k],
                          notes=(FINDINGS_NOTE, DEFLECTION_ASSUMPTION)))
    return out
