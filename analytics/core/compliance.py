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
    "load_response_many",
    "ResponsesMany",
    "play_sensitivity",
    "play_bands",
    "stability_verdict",
    "stability_verdicts",
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
    """What depends only on a corner's link lines: G⁻¹ (6, 6), the play sensitivities
    ∂toe/∂lᵢ, ∂camber/∂lᵢ (deg/mm, each (5,)), the design toe and camber (deg) and spin axis."""

    g_inv: np.ndarray
    toe_per_mm: np.ndarray
    camber_per_mm: np.ndarray
    toe0_deg: float
    camber0_deg: float
    spin: np.ndarray


@functools.lru_cache(maxsize=256)
def _geometry_of(chassis: bytes, carrier: bytes, centre: bytes, spin: bytes) -> _Geometry:
    def arr(b: bytes, shape):
        return np.frombuffer(b, dtype=float).reshape(shape)

    g = line_matrix(arr(chassis, (5, 3)), arr(carrier, (5, 3)), arr(centre, (3,)))
    g_inv = np.linalg.inv(g)
    # u_i solves Gᵀ u = e_i: the carrier motion per unit lengthening of link i
    u = g_inv.T[:, :5]  # (6, 5)
    ds = np.cross(u[3:].T, arr(spin, (3,)))  # (5, 3)
    gt, gc = toe_camber_gradient(arr(spin, (3,)))
    g_inv.setflags(write=False)
    toe0, camber0 = toe_camber_deg(arr(spin, (3,)))
    return _Geometry(g_inv, ds @ gt, ds @ gc, float(toe0), float(camber0), arr(spin, (3,)))


def _geometry(corner: Corner) -> _Geometry:
    """The corner's :class:`_Geometry`, worked out once per distinct geometry (a worn corner
    shares its new corner's link lines: only stiffness and play differ)."""
    parts = (np.ascontiguousarray(corner.chassis, dtype=float).tobytes(),
             np.ascontiguousarray(corner.carrier, dtype=float).tobytes(),
             np.ascontiguousarray(corner.wheel_centre, dtype=float).tobytes(),
             np.ascontiguousarray(corner.spin_axis, dtype=float).tobytes())
    return _geometry_of(*parts)


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
    geo = _geometry(corner)
    members, u, toe, camber = _responses(geo, corner.wheel_centre, _stiffness_diag(corner)[None],
                                         f, p)
    tb, cb = play_bands(corner)
    return ComplianceResult(
        force_N=f, point_mm=np.array(p), member_forces_N=members[:, :5],
        vertical_reaction_N=members[:, 5], displacement_mm=u[0, :, :3], rotation_rad=u[0, :, 3:],
        toe_change_deg=toe[0], camber_change_deg=camber[0], toe_band_deg=tb,
        camber_band_deg=cb, link_names=corner.link_names)


def _responses(geo: _Geometry, centre: np.ndarray, inv_k: np.ndarray, f: np.ndarray,
               p: np.ndarray):
    """The model of :func:`load_response` for ``K`` stiffness sets of one geometry at once.

    ``inv_k``: (K, 6) compliances 1/k (mm/N, sixth 0); ``f``, ``p``: (m, 3) forces N at points mm.
    Returns member forces (m, 6) N (they do not depend on stiffness: statically determinate),
    carrier displacements ``u`` (K, m, 6) [mm, rad], toe and camber changes (K, m) deg.
    """
    wrench = np.concatenate([f, np.cross(p - centre, f)], axis=1)  # (m, 6)
    members = wrench @ geo.g_inv.T  # (m, 6): G⁻¹ W
    u = (members[None] * inv_k[:, None, :]) @ geo.g_inv  # (K, m, 6): G⁻ᵀ δ
    spin = rotate_vectors(u[..., 3:], geo.spin)
    toe, camber = toe_camber_deg(spin)
    return members, u, toe - geo.toe0_deg, camber - geo.camber0_deg


@dataclass(frozen=True)
class ResponsesMany:
    """Toe and camber changes of ``K`` states of one corner under ``m`` loads (deg).

    ``toe_change_deg``, ``camber_change_deg``: (K, m); ``toe_band_deg``, ``camber_band_deg``: (K,)
    ± half-widths of the play bands.
    """

    toe_change_deg: np.ndarray
    camber_change_deg: np.ndarray
    toe_band_deg: np.ndarray
    camber_band_deg: np.ndarray


def load_response_many(corners: list[Corner], force_N: ArrayLike) -> ResponsesMany:
    """Toe and camber changes of many corner states under the same forces ``(m, 3)`` N at each
    contact patch — :func:`load_response` of each, worked out together for the states that share
    a geometry (a corner and its worn copies differ only in stiffness and play)."""
    f = np.asarray(force_N, dtype=float).reshape(-1, 3)
    if not np.all(np.isfinite(f)):
        raise ValueError("force_N: must be finite")
    K, m = len(corners), f.shape[0]
    toe, camber = np.empty((K, m)), np.empty((K, m))
    groups: dict[int, list[int]] = {}
    geos = [_geometry(c) for c in corners]
    for i, geo in enumerate(geos):
        groups.setdefault(id(geo), []).append(i)
    for rows in groups.values():
        c0 = corners[rows[0]]
        inv_k = np.zeros((len(rows), 6))
        inv_k[:, :5] = 1.0 / np.array([corners[i].stiffness for i in rows])
        p = np.broadcast_to(c0.contact_patch, f.shape)
        _, _, t, cb = _responses(geos[rows[0]], c0.wheel_centre, inv_k, f, p)
        toe[rows], camber[rows] = t, cb
    bands = np.array([play_bands(c) for c in corners]).reshape(K, 2)
    return ResponsesMany(toe, camber, bands[:, 0], bands[:, 1])


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
        geo = _geometry(corner)
        members = geo.g_inv @ wrench  # (6,): G⁻¹ W
        delta0 = members * _stiffness_diag(corner)  # (6,) deflections with the corner's own k
        self._rot0 = (delta0 @ geo.g_inv)[3:]  # (3,) rad: G⁻ᵀ δ0
        self._rot_per = geo.g_inv[i, 3:]  # (3,) rad per mm of link i: G⁻ᵀ eᵢ
        self._force_i, self._delta0_i = float(members[i]), float(delta0[i])
        self._spin = geo.spin
        self._toe0 = geo.toe0_deg

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
    return stability_verdicts([corner], lateral_force_N)[0]


def stability_verdicts(corners: list[Corner], lateral_force_N: float | None = None
                       ) -> list[StabilityVerdict]:
    """:func:`stability_verdict` of many corners under the same force, worked out together."""
    default = lateral_force_N is None
    mag = DEFAULT_VERDICT_LATERAL_FORCE_N if default else float(lateral_force_N)
    if not np.isfinite(mag) or mag <= 0:
        raise ValueError("lateral_force_N: must be a positive number")
    out: list[StabilityVerdict | None] = [None] * len(corners)
    for side, inboard in (("left", -1.0), ("right", 1.0)):
        idx = [i for i, c in enumerate(corners) if c.side == side]
        if not idx:
            continue
        res = load_response_many([corners[i] for i in idx], [0.0, inboard * mag, 0.0])
        for j, i in enumerate(idx):
            dt = float(res.toe_change_deg[j, 0])
            band = float(res.toe_band_deg[j])
            direction = "toe-in" if dt > 0 else "toe-out"
            if abs(dt) <= band:
                verdict = "uncertain"
            else:
                verdict = "stable" if dt > 0 else "unstable"
            out[i] = StabilityVerdict(verdict=verdict, direction=direction, toe_change_deg=dt,
                                      toe_band_deg=band, lateral_force_N=mag,
                                      force_is_default=default)
    return out
