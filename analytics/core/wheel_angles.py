"""Toe and camber from a wheel's outboard spin axis, their gradients, and small rotations.

DESIGN.md §3 (ISO 8855 axes: x forward, y left, z up). For the *outboard* unit spin-axis vector
``s`` of either wheel:

- toe ``= atan2(s_x, |s_y|)`` (deg), positive = toe-in (front of the wheel toward the centreline);
- camber ``= asin(-s_z)`` (deg), positive = top of the wheel leans outboard.

Both formulas give the same sign meaning on the left (``s_y > 0``) and right (``s_y < 0``) side.
"""
from __future__ import annotations

import numpy as np

__all__ = [
    "rotate_vectors",
    "rotation_matrices",
    "spin_axis_from_angles",
    "toe_camber_deg",
    "toe_camber_gradient",
]


def toe_camber_deg(spin_axis: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Toe and camber (deg) of outboard spin axes ``(..., 3)``; returns two ``(...)`` arrays."""
    s = np.asarray(spin_axis, dtype=float)
    toe = np.degrees(np.arctan2(s[..., 0], np.abs(s[..., 1])))
    camber = np.degrees(np.arcsin(np.clip(-s[..., 2], -1.0, 1.0)))
    return toe, camber


def toe_camber_gradient(spin_axis: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gradients (deg per unit change of ``s``) of toe and camber; each ``(..., 3)``."""
    s = np.asarray(spin_axis, dtype=float)
    sx, sy, sz = s[..., 0], s[..., 1], s[..., 2]
    rho2 = sx**2 + sy**2
    g_toe = np.stack([np.abs(sy) / rho2, -sx * np.sign(sy) / rho2, np.zeros_like(sz)], axis=-1)
    g_cam = np.stack([np.zeros_like(sx), np.zeros_like(sy), -1.0 / np.sqrt(1.0 - sz**2)], axis=-1)
    return np.degrees(g_toe), np.degrees(g_cam)


def rotation_matrices(rotvec: np.ndarray) -> np.ndarray:
    """Rodrigues' formula: rotation vectors ``(..., 3)`` (rad) → rotation matrices ``(..., 3, 3)``."""
    w = np.asarray(rotvec, dtype=float)
    theta = np.linalg.norm(w, axis=-1)[..., None, None]
    k = np.zeros(w.shape[:-1] + (3, 3))
    k[..., 0, 1], k[..., 0, 2] = -w[..., 2], w[..., 1]
    k[..., 1, 0], k[..., 1, 2] = w[..., 2], -w[..., 0]
    k[..., 2, 0], k[..., 2, 1] = -w[..., 1], w[..., 0]
    a, b = _rodrigues_coefficients(theta)
    return np.eye(3) + a * k + b * (k @ k)


def _rodrigues_coefficients(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``sin θ / θ`` and ``(1 − cos θ) / θ²`` with their series below 1e-8 rad."""
    small = theta < 1e-8
    safe = np.where(small, 1.0, theta)
    a = np.where(small, 1.0 - theta**2 / 6.0, np.sin(safe) / safe)
    b = np.where(small, 0.5 - theta**2 / 24.0, (1.0 - np.cos(safe)) / safe**2)
    return a, b


def rotate_vectors(rotvec: np.ndarray, vector: np.ndarray) -> np.ndarray:
    """Rotate ``vector`` ``(3,)`` or ``(..., 3)`` by rotation vectors ``(..., 3)`` (rad).

    The same Rodrigues formula as :func:`rotation_matrices` applied to the vector directly,
    ``v + a (w × v) + b w × (w × v)``, without forming the ``(..., 3, 3)`` matrices: about ten
    times less work when many rotations act on one spin axis. Returns ``(..., 3)``.
    """
    w = np.asarray(rotvec, dtype=float)
    v = np.broadcast_to(np.asarray(vector, dtype=float), w.shape)
    a, b = _rodrigues_coefficients(np.linalg.norm(w, axis=-1)[..., None])
    wx, wy, wz = w[..., 0], w[..., 1], w[..., 2]
    vx, vy, vz = v[..., 0], v[..., 1], v[..., 2]
    c = np.stack([wy * vz - wz * vy, wz * vx - wx * vz, wx * vy - wy * vx], axis=-1)  # w × v
    cx, cy, cz = c[..., 0], c[..., 1], c[..., 2]
    cc = np.stack([wy * cz - wz * cy, wz * cx - wx * cz, wx * cy - wy * cx], axis=-1)  # w × (w × v)
    return v + a * c + b * cc


def spin_axis_from_angles(toe_deg: float, camber_deg: float, side: str) -> np.ndarray:
    """Outboard unit spin axis (3,) of a wheel with the given toe and camber (deg) on ``side``."""
    if side not in ("left", "right"):
        raise ValueError("side: must be 'left' or 'right'")
    t, c = np.radians(toe_deg), np.radians(camber_deg)
    out = 1.0 if side == "left" else -1.0
    return np.array([np.cos(c) * np.sin(t), out * np.cos(c) * np.cos(t), -np.sin(c)])
