"""Linear elastokinematics of a corner with the wheel-centre height held (DESIGN.md §4).

As on a kinematics-and-compliance rig: the body is held, the wheel-centre height is held, and a
force acts at the contact patch (or any given point). With ``G`` the 6×6 matrix whose columns are
the five unit link lines (directed chassis → carrier, Plücker coordinates about the wheel centre)
and the upward vertical line through the wheel centre:

- member forces ``f = G⁻¹ W`` (N; links tension positive; the sixth entry is the vertical load
  taken by the height constraint, positive when the applied load pushes the wheel up), with
  ``W = [F, (p − c) × F]`` the applied force and its moment about the wheel centre (N, N·mm);
- link deflections ``δᵢ = fᵢ / kᵢ`` (mm, lengthening positive), zero for the height constraint;
- carrier displacement ``u = [Δc, ω]`` (mm, rad) from ``Gᵀ u = δ``;
- Δtoe and Δcamber (deg) from the spin axis rotated by ``ω``;
- play bands ``Σ |∂toe/∂lᵢ| · playᵢ / 2`` (and the same for camber), the derivatives taken with
  the five link lengths and the wheel-centre height as coordinates (a half-width: ± band).

Stability rule (vehicle-dynamics handbooks, DESIGN.md §4): under a lateral force the loaded outer
rear wheel should change toward toe-in (stable); toward toe-out the rear axle steers out of the
turn (unstable).
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from .corner_file import Corner, line_matrix
from .wheel_angles import rotate_vectors, toe_camber_deg, toe_camber_gradient

__all__ = [
    "ComplianceResult",
    "StabilityVerdict",
    "compliance_matrix",
    "load_response",
    "play_sensitivity",
    "play_bands",
    "stability_verdict",
    "LinkStiffnessToe",
    "toe_change_for_link_stiffness",
    "DEFAULT_VERDICT_LATERAL_FORCE_N",
]

DEFAULT_VERDICT_LATERAL_FORCE_N = 3000.0  # assumption (default): lateral force of a loaded wheel


@dataclass(frozen=True, eq=False)
class ComplianceResult:
    """Response of a corner to ``m`` loads.

    Attributes:
        force_N: (m, 3) applied forces, N. point_mm: (m, 3) where they act, mm.
        member_forces_N: (m, 5) link forces, N, tension positive (order of ``link_names``).
        vertical_reaction_N: (m,) load taken by the held wheel-centre height, N.
        displacement_mm: (m, 3) wheel-centre displacement, mm. rotation_rad: (m, 3) rotation.
        toe_change_deg, camber_change_deg: (m,) change from design, deg.
        toe_band_deg, camber_band_deg: ± half-width of the play band, deg (load-independent).
        link_names: the five link names.
    """

    force_N: np.ndarray
    point_mm: np.ndarray
    member_forces_N: np.ndarray
    vertical_reaction_N: np.ndarray
    displacement_mm: np.ndarray
    rotation_rad: np.ndarray
    toe_change_deg: np.ndarray
    camber_change_deg: np.ndarray
    toe_band_deg: float
    camber_band_deg: float
    link_names: tuple[str, ...]

    def member_forces(self, i: int = 0) -> dict[str, float]:
        """``{link name: force N}`` of load ``i``."""
        return {n: float(f) for n, f in zip(self.link_names, self.member_forces_N[i], strict=True)}


@dataclass(frozen=True)
class StabilityVerdict:
    """Direction of the compliance toe change of a loaded outer rear wheel.

    ``verdict``: "stable" (toward toe-in), "unstable" (toward toe-out), or "uncertain" when the
    play band (± ``toe_band_deg``) could carry the change across zero. ``direction`` gives the
    nominal direction regardless of the band.
    """

    verdict: str
    direction: str
    toe_change_deg: float
    toe_band_deg: float
    lateral_force_N: float
    force_is_default: bool

    @property
    def note(self) -> str:
        """One line for screens, with the force assumption shown."""
        src = " (default)" if self.force_is_default else ""
        return (f"outer rear wheel under {self.lateral_force_N:g} N inboard lateral force"
                f"{src}: toe change {self.toe_change_deg:+.3f}° ± {self.toe_band_deg:.3f}° "
                f"→ {self.direction} ({self.verdict})")


def _stiffness_diag(corner: Corner) -> np.ndarray:
    inv = np.zeros(6)
    inv[:5] = 1.0 / corner.stiffness
    return inv


@dataclass(frozen=True)
class _Geometry:
    """What depends only on a corner's link lines: G (6, 6), G⁻¹ (6, 6) and the play
    sensitivities ∂toe/∂lᵢ, ∂camber/∂lᵢ (deg/mm, each (5,))."""

    g: np.ndarray
    g_inv: np.ndarray
    toe_per_mm: np.ndarray
    camber_per_mm: np.ndarray


@functools.lru_cache(maxsize=256)
def _geometry_of(key: bytes, chassis: bytes, carrier: bytes, centre: bytes, spin: bytes
                 ) -> _Geometry:
    def arr(b: bytes, shape):
        return np.frombuffer(b, dtype=float).reshape(shape)

    g = line_matrix(arr(chassis, (5, 3)), arr(carrier, (5, 3)), arr(centre, (3,)))
    g_inv = np.linalg.inv(g)
    # u_i solves Gᵀ u = e_i: the carrier motion per unit lengthening of link i
    u = g_inv.T[:, :5]  # (6, 5)
    ds = np.cross(u[3:].T, arr(spin, (3,)))  # (5, 3)
    gt, gc = toe_camber_gradient(arr(spin, (3,)))
    for a in (g, g_inv):
        a.setflags(write=False)
    return _Geometry(g, g_inv, ds @ gt, ds @ gc)


def _geometry(corner: Corner) -> _Geometry:
    """The corner's :class:`_Geometry`, worked out once per distinct geometry (a worn corner
    shares its new corner's link lines: only stiffness and play differ)."""
    parts = (np.ascontiguousarray(corner.chassis, dtype=float).tobytes(),
             np.ascontiguousarray(corner.carrier, dtype=float).tobytes(),
             np.ascontiguousarray(corner.wheel_centre, dtype=float).tobytes(),
             np.ascontiguousarray(corner.spin_axis, dtype=float).tobytes())
    return _geometry_of(b"".join(parts), *parts)


def compliance_matrix(corner: Corner) -> np.ndarray:
    """C (6, 6): carrier displacement ``[Δc mm, ω rad]`` per wrench ``[F N, M N·mm]``.

    ``C = G⁻ᵀ diag(1/k₁…1/k₅, 0) G⁻¹`` — symmetric positive semi-definite (Maxwell–Betti).
    """
    g_inv = _geometry(corner).g_inv
    return g_inv.T @ (_stiffness_diag(corner)[:, None] * g_inv)


def play_sensitivity(corner: Corner) -> tuple[np.ndarray, np.ndarray]:
    """∂toe/∂lᵢ and ∂camber/∂lᵢ (deg per mm of link length), each (5,), height held."""
    geo = _geometry(corner)
    return geo.toe_per_mm.copy(), geo.camber_per_mm.copy()


def play_bands(corner: Corner) -> tuple[float, float]:
    """Worst-case ± half-widths (deg) of toe and camber from the links' play."""
    geo = _geometry(corner)
    dt, dc = geo.toe_per_mm, geo.camber_per_mm
    return float(np.sum(np.abs(dt) * corner.play / 2.0)), float(np.sum(np.abs(dc) * corner.play / 2.0))


def load_response(corner: Corner, force_N: ArrayLike, point_mm: ArrayLike | None = None
                  ) -> ComplianceResult:
    """Linear response to forces ``(3,)`` or ``(m, 3)`` N acting at ``point_mm``.

    ``point_mm``: (3,) or (m, 3) mm; default the corner's contact patch.
    """
    f = np.asarray(force_N, dtype=float)
    if f.ndim == 1:
        f = f[None]
    if f.ndim != 2 or f.shape[1] != 3:
        raise ValueError("force_N: must have shape (3,) or (m, 3)")
    if not np.all(np.isfinite(f)):
        raise ValueError("force_N: must be finite")
    p = corner.contact_patch if point_mm is None else np.asarray(point_mm, dtype=float)
    if p.shape not in ((3,), (f.shape[0], 3)):
        raise ValueError("point_mm: must have shape (3,) or (m, 3) matching force_N")
    if not np.all(np.isfinite(p)):
        raise ValueError("point_mm: must be finite")
    p = np.broadcast_to(p, f.shape)
    wrench = np.concatenate([f, np.cross(p - corner.wheel_centre, f)], axis=1)  # (m, 6)
    g_inv = _geometry(corner).g_inv
    members = wrench @ g_inv.T  # (m, 6): G⁻¹ wrench
    delta = members * _stiffness_diag(corner)
    u = delta @ g_inv  # (m, 6): G⁻ᵀ delta
    spin = rotate_vectors(u[:, 3:], corner.spin_axis)
    toe, camber = toe_camber_deg(spin)
    toe0, camber0 = toe_camber_deg(corner.spin_axis)
    tb, cb = play_bands(corner)
    return ComplianceResult(
        force_N=f, point_mm=np.array(p), member_forces_N=members[:, :5],
        vertical_reaction_N=members[:, 5], displacement_mm=u[:, :3], rotation_rad=u[:, 3:],
        toe_change_deg=toe - toe0, camber_change_deg=camber - camber0, toe_band_deg=tb,
        camber_band_deg=cb, link_names=corner.link_names)


class LinkStiffnessToe:
    """Toe change (deg) under one force (3,) N at the contact patch as a function of one link's
    stiffness, everything that does not depend on that stiffness worked out once.

    Same model as :func:`load_response`: member forces do not depend on stiffness (statically
    determinate), so only link ``i``'s deflection ``fᵢ/k`` changes, and the carrier
    displacement is linear in it: ``u = u0 + (fᵢ/k − δ0ᵢ) · G⁻ᵀ eᵢ``. Calling it with ``k`` of
    any shape (N/mm, finite, > 0) returns the toe change of that shape.
    """

    def __init__(self, corner: Corner, force_N: ArrayLike, link: str):
        f = np.asarray(force_N, dtype=float).reshape(3)
        if not np.all(np.isfinite(f)):
            raise ValueError("force_N must be finite")
        i = corner.link_index(link)
        wrench = np.concatenate([f, np.cross(corner.contact_patch - corner.wheel_centre, f)])
        g = line_matrix(corner.chassis, corner.carrier, corner.wheel_centre)
        members = np.linalg.solve(g, wrench)  # (6,)
        delta0 = members * _stiffness_diag(corner)  # (6,) deflections with the corner's own k
        self._rot0 = np.linalg.solve(g.T, delta0)[3:]  # (3,) rad
        self._rot_per = np.linalg.solve(g.T, np.eye(6)[i])[3:]  # (3,) rad per mm of link i
        self._force_i, self._delta0_i = float(members[i]), float(delta0[i])
        self._spin = corner.spin_axis
        self._toe0 = float(toe_camber_deg(corner.spin_axis)[0])

    def __call__(self, stiffness_N_per_mm: ArrayLike) -> np.ndarray:
        k = np.asarray(stiffness_N_per_mm, dtype=float)
        if not (np.all(np.isfinite(k)) and np.all(k > 0)):
            raise ValueError("stiffness_N_per_mm must be finite and > 0")
        t = (self._force_i / k - self._delta0_i)[..., None]  # link i's extra deflection, mm
        spin = rotate_vectors(self._rot0 + t * self._rot_per, self._spin)
        toe, _ = toe_camber_deg(spin)
        return toe - self._toe0


def toe_change_for_link_stiffness(corner: Corner, force_N: ArrayLike, link: str,
                                  stiffness_N_per_mm: ArrayLike) -> np.ndarray:
    """Toe change (deg, shape (n,)) under one force (3,) N at the contact patch, with link
    ``link``'s stiffness set to each of ``stiffness_N_per_mm`` (n,) and the others as in
    ``corner`` (see :class:`LinkStiffnessToe`, which keeps the fixed part for many calls)."""
    k = np.asarray(stiffness_N_per_mm, dtype=float).reshape(-1)
    return LinkStiffnessToe(corner, force_N, link)(k)


def stability_verdict(corner: Corner, lateral_force_N: float | None = None) -> StabilityVerdict:
    """Verdict for this corner loaded as the outer rear wheel in a turn.

    The outer wheel's lateral tyre force points toward the turn centre, i.e. inboard (−y for a
    left corner, +y for a right one); it acts at the contact patch. ``lateral_force_N`` is its
    magnitude (default :data:`DEFAULT_VERDICT_LATERAL_FORCE_N`, shown as an assumption).
    """
    default = lateral_force_N is None
    mag = DEFAULT_VERDICT_LATERAL_FORCE_N if default else float(lateral_force_N)
    if not np.isfinite(mag) or mag <= 0:
        raise ValueError("lateral_force_N: must be a positive number")
    inboard = -1.0 if corner.side == "left" else 1.0
    res = load_response(corner, [0.0, inboard * mag, 0.0])
    dt = float(res.toe_change_deg[0])
    band = res.toe_band_deg
    direction = "toe-in" if dt > 0 else "toe-out"
    if abs(dt) <= band:
        verdict = "uncertain"
    else:
        verdict = "stable" if dt > 0 else "unstable"
    return StabilityVerdict(verdict=verdict, direction=direction, toe_change_deg=dt,
                            toe_band_deg=band, lateral_force_N=mag, force_is_default=default)
