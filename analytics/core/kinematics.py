"""Kinematic sweep of a five-link corner (DESIGN.md §4, "Kinematics").

The carrier is one rigid body. Its pose at travel ``s`` (mm, positive = bump) is the rotation
``R`` about the design wheel centre ``c0`` and the translation ``t`` of the wheel centre: a carrier
point ``p`` (design position) moves to ``c0 + t + R (p - c0)``. Six equations fix it: the five
link lengths stay at their design values and the wheel-centre height is ``z0 + s``.

Newton's method with the analytic Jacobian: for an increment ``(Δt, ω)`` of the wheel centre and a
small rotation ``ω`` (rad) about it, link ``i`` lengthens by ``e_i·Δt + (r_i × e_i)·ω`` — the row is
the link's unit line vector (Plücker coordinates about the current wheel centre); the sixth row is
``[0, 0, 1, 0, 0, 0]``. All travel positions are solved together (batched ``numpy.linalg.solve``).

Continuation: every requested travel is reached along its own path from the design pose, in
stages ``s·k/K`` (``k = 1..K``, at most :data:`CONTINUATION_STEP_MM` per stage), with the
tangent predictor ``J⁻¹ [0,0,0,0,0,1]`` and Newton correction. A position whose path meets a
singular Jacobian (a link or the carrier goes over centre, changing the sign of ``det J``), or
where Newton does not converge, is reported with :class:`KinematicsError` — never a wrong pose.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from .corner_file import Corner
from .wheel_angles import rotation_matrices, toe_camber_deg, toe_camber_gradient

__all__ = [
    "KinematicsError",
    "SweepResult",
    "sweep",
    "design_rates",
    "LENGTH_TOL_MM",
    "CONTINUATION_STEP_MM",
    "MAX_NEWTON_ITER",
    "JACOBIAN_DET_RATIO_MIN",
]

LENGTH_TOL_MM = 1e-11  # Newton stops when every link-length and height error is below this
CONTINUATION_STEP_MM = 10.0  # largest travel change per continuation stage
MAX_NEWTON_ITER = 25  # Newton iterations allowed per stage
JACOBIAN_DET_RATIO_MIN = 1e-6  # |det J| (length-scaled) below this × design value: singular
MAX_TRAVEL_MM = 1000.0  # a request beyond this is refused outright


class KinematicsError(ValueError):
    """A travel position cannot be reached; ``travel_mm`` and ``reason`` say which and why."""

    def __init__(self, travel_mm: float, reason: str):
        self.travel_mm = float(travel_mm)
        self.reason = reason
        super().__init__(f"travel {travel_mm:g} mm: {reason}")


@dataclass(frozen=True, eq=False)
class SweepResult:
    """Poses and wheel angles over a sweep of ``n`` travel positions.

    Attributes:
        travel_mm: (n,) requested travel, mm (positive = bump), in the order asked.
        toe_deg, camber_deg: (n,) absolute toe and camber, deg (DESIGN.md §3).
        rotation: (n, 3, 3) carrier rotation about the design wheel centre.
        translation: (n, 3) wheel-centre displacement from design, mm.
        wheel_centre: (n, 3) wheel centre, mm.
        spin_axis: (n, 3) outboard unit spin axis.
        carrier_points: (n, 5, 3) carrier-side ball-joint centres, mm.
        length_error_mm: (n, 5) |link length − design length|, mm.
        bump_steer_deg_per_10mm, camber_gain_deg_per_10mm: rates at design (d/ds · 10 mm).
        ok: (n,) True where the pose was reached (always all True unless ``strict=False``).
        problems: {index: reason} for positions not reached (``strict=False`` only).
    """

    travel_mm: np.ndarray
    toe_deg: np.ndarray
    camber_deg: np.ndarray
    rotation: np.ndarray
    translation: np.ndarray
    wheel_centre: np.ndarray
    spin_axis: np.ndarray
    carrier_points: np.ndarray
    length_error_mm: np.ndarray
    bump_steer_deg_per_10mm: float
    camber_gain_deg_per_10mm: float
    ok: np.ndarray
    problems: dict[int, str] = field(default_factory=dict)

    def rows(self) -> list[dict]:
        """``[{travel_mm, toe_deg, camber_deg}, …]`` for the reached positions."""
        return [
            {"travel_mm": float(s), "toe_deg": float(t), "camber_deg": float(c)}
            for s, t, c, good in zip(self.travel_mm, self.toe_deg, self.camber_deg, self.ok,
                                     strict=True)
            if good
        ]


def _state(corner: Corner, rot: np.ndarray, trans: np.ndarray, travel: np.ndarray):
    """Residuals g (n, 6) and Jacobian J (n, 6, 6) at poses (rot (n,3,3), trans (n,3))."""
    c = corner.wheel_centre + trans  # (n, 3)
    r = np.matmul(corner.carrier - corner.wheel_centre, rot.transpose(0, 2, 1))  # (n, 5, 3)
    d = c[:, None, :] + r - corner.chassis  # (n, 5, 3)
    length = np.linalg.norm(d, axis=2)
    e = d / length[..., None]
    n = rot.shape[0]
    jac = np.zeros((n, 6, 6))
    jac[:, :5, :3] = e
    jac[:, :5, 3:] = np.cross(r, e)
    jac[:, 5, 2] = 1.0
    g = np.empty((n, 6))
    g[:, :5] = length - corner.link_lengths
    g[:, 5] = trans[:, 2] - travel
    return g, jac, c[:, None, :] + r


def _scale(corner: Corner) -> float:
    rel = corner.carrier - corner.wheel_centre
    return float(np.sqrt(np.mean(np.sum(rel**2, axis=1)))) or 1.0


def _singular_link(corner: Corner, jac: np.ndarray) -> str:
    """Name of the link taking the largest share of the dependent combination of rows."""
    js = jac.copy()
    js[:, 3:] /= _scale(corner)
    u, _, _ = np.linalg.svd(js)
    y = np.abs(u[:, -1])
    return corner.link_names[int(np.argmax(y[:5]))]


def design_rates(corner: Corner) -> tuple[float, float, np.ndarray]:
    """Bump steer and camber gain at design (deg per 10 mm of travel) and the tangent (6,).

    The tangent ``v = J⁻¹ [0,0,0,0,0,1]`` is (wheel-centre velocity mm/mm, rotation rate rad/mm).
    """
    g, jac, _ = _state(corner, np.eye(3)[None], np.zeros((1, 3)), np.zeros(1))
    v = np.linalg.solve(jac[0], np.array([0, 0, 0, 0, 0, 1.0]))
    ds = np.cross(v[3:], corner.spin_axis)
    gt, gc = toe_camber_gradient(corner.spin_axis)
    return float(gt @ ds * 10.0), float(gc @ ds * 10.0), v


def sweep(corner: Corner, travel_mm: ArrayLike, *, strict: bool = True) -> SweepResult:
    """Solve the carrier pose at each travel (mm, ``(n,)``, positive = bump).

    Returns a :class:`SweepResult`. With ``strict`` (default) a position that cannot be reached
    raises :class:`KinematicsError` naming the travel nearest design that fails and why; with
    ``strict=False`` such positions are NaN, ``ok`` is False there and ``problems`` says why.
    Link lengths are held to :data:`LENGTH_TOL_MM` (far inside 1e-9 mm).
    """
    s = np.atleast_1d(np.asarray(travel_mm, dtype=float))
    if s.ndim != 1 or s.size == 0:
        raise ValueError("travel_mm: must be a non-empty 1-D array of travel positions (mm)")
    if not np.all(np.isfinite(s)):
        raise ValueError("travel_mm: must be finite")
    if np.any(np.abs(s) > MAX_TRAVEL_MM):
        raise ValueError(f"travel_mm: beyond ±{MAX_TRAVEL_MM:g} mm")
    n = s.size
    scale = _scale(corner)
    rot = np.repeat(np.eye(3)[None], n, axis=0)
    trans = np.zeros((n, 3))
    e6 = np.zeros(6)
    e6[5] = 1.0
    g, jac, _ = _state(corner, rot, trans, np.zeros(n))
    js0 = jac[0].copy()
    js0[:, 3:] /= scale
    det0 = np.linalg.det(js0)
    det0_sign, det0_abs = np.sign(det0), abs(det0)
    stages = max(1, int(np.ceil(np.max(np.abs(s)) / CONTINUATION_STEP_MM)))
    alive = np.ones(n, dtype=bool)
    problems: dict[int, str] = {}
    prev_target = np.zeros(n)
    for k in range(1, stages + 1):
        idx = np.flatnonzero(alive)
        if idx.size == 0:
            break
        target = s[idx] * (k / stages)
        # predictor along the tangent of the converged pose (jac from the last stage)
        v = np.linalg.solve(jac[idx], np.broadcast_to(e6, (idx.size, 6))[..., None])[..., 0]
        step = v * (target - prev_target[idx])[:, None]
        r_i = rotation_matrices(step[:, 3:]) @ rot[idx]
        t_i = trans[idx] + step[:, :3]
        converged = np.zeros(idx.size, dtype=bool)
        diverged = np.zeros(idx.size, dtype=bool)
        for it in range(MAX_NEWTON_ITER + 1):
            g_i, j_i, _ = _state(corner, r_i, t_i, target)
            err = np.max(np.abs(g_i), axis=1)
            converged = err <= LENGTH_TOL_MM
            bad = ~np.isfinite(err) | (err > 10.0 * CONTINUATION_STEP_MM + 10.0)
            diverged |= bad
            active = ~(converged | diverged)
            if not np.any(active) or it == MAX_NEWTON_ITER:
                break
            with np.errstate(all="ignore"):
                try:
                    delta = np.linalg.solve(j_i[active], -g_i[active][..., None])[..., 0]
                except np.linalg.LinAlgError:
                    delta = np.stack([_lstsq(jj, -gg) for jj, gg in
                                      zip(j_i[active], g_i[active], strict=True)])
            delta = np.where(np.isfinite(delta), delta, 0.0)
            r_i[active] = rotation_matrices(delta[:, 3:]) @ r_i[active]
            t_i[active] = t_i[active] + delta[:, :3]
        js = j_i.copy()
        js[:, :, 3:] /= scale
        with np.errstate(all="ignore"):
            dets = np.linalg.det(js)
        over = np.sign(dets) != det0_sign
        singular = ~np.isfinite(dets) | (np.abs(dets) < JACOBIAN_DET_RATIO_MIN * det0_abs)
        for local in np.flatnonzero(singular | over | ~converged):
            gi = idx[local]
            if singular[local] or over[local]:
                reason = (f"link '{_singular_link(corner, j_i[local])}' goes over centre near "
                          f"{target[local]:g} mm (Jacobian singular)")
            else:
                reason = f"no convergence near {target[local]:g} mm (the carrier locks)"
            problems[int(gi)] = reason
            alive[gi] = False
        good = ~(singular | over) & converged
        keep = idx[good]
        rot[keep], trans[keep] = r_i[good], t_i[good]
        jac[keep] = j_i[good]
        prev_target[keep] = target[good]
    if problems and strict:
        first = min(problems, key=lambda i: (abs(s[i]), s[i]))
        raise KinematicsError(s[first], f"cannot be reached: {problems[first]}")
    ok = np.ones(n, dtype=bool)
    ok[list(problems)] = False
    g, jac, points = _state(corner, rot, trans, s)
    spin = np.einsum("nij,j->ni", rot, corner.spin_axis)
    toe, camber = toe_camber_deg(spin)
    bump, gain, _ = design_rates(corner)
    arrays = dict(toe_deg=toe, camber_deg=camber, rotation=rot, translation=trans,
                  wheel_centre=corner.wheel_centre + trans, spin_axis=spin, carrier_points=points,
                  length_error_mm=np.abs(g[:, :5]))
    for key, arr in arrays.items():
        arr = arr.astype(float, copy=True)
        arr[~ok] = np.nan
        arr.setflags(write=False)
        arrays[key] = arr
    travel = s.copy()
    travel.setflags(write=False)
    return SweepResult(travel_mm=travel, bump_steer_deg_per_10mm=bump,
                       camber_gain_deg_per_10mm=gain, ok=ok, problems=problems, **arrays)


def _lstsq(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.linalg.lstsq(a, b, rcond=None)[0]
