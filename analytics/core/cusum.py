"""Two-sided tabular CUSUM for step changes (e.g. a kerb strike) in standardised residuals.

The scheme is Page's tabular CUSUM as presented in Montgomery, *Introduction to Statistical
Quality Control*, ch. 9 ("The cumulative sum control chart"). Inputs are **standardised**
values ``z`` (dimensionless, in units of the in-control standard deviation σ, in-control mean
0)::

    C⁺_i = max(0, z_i − k + C⁺_{i−1})        C⁻_i = max(0, −z_i − k + C⁻_{i−1})
    C⁺_0 = C⁻_0 = 0,   alarm when C⁺_i > h or C⁻_i > h.

Defaults ``k = 0.5`` (tuned to detect a 1σ shift) and ``h = 5`` (decision interval), both in σ
units, the common choice Montgomery tabulates (in-control ARL ≈ 465, ARL ≈ 10.4 at a 1σ shift;
values recalled from memory in the tests). The start of a step is estimated by Page's rule: the
observation after the last time the alarming side was zero.

Pure numpy; no Django.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "CUSUM_H",
    "CUSUM_K",
    "CusumStep",
    "cusum_paths",
    "detect_steps",
    "first_alarm",
]

#: Reference value k, σ units (Montgomery ch. 9: k = δ/2 for a shift of δ = 1σ).
CUSUM_K: float = 0.5
#: Decision interval h, σ units (Montgomery ch. 9: h = 4 or 5 are the usual choices).
CUSUM_H: float = 5.0


@dataclass(frozen=True)
class CusumStep:
    """One detected step.

    Attributes:
        alarm_index: index of the observation at which the CUSUM signalled.
        start_index: estimated index of the first observation after the step (Page's rule,
            ``alarm_index − N + 1`` where N is the run of positive values on the alarming side).
        direction: +1 for an upward step, −1 for a downward one.
    """

    alarm_index: int
    start_index: int
    direction: int


def _check_kh(k: float, h: float) -> None:
    if not (np.isfinite(k) and k >= 0):
        raise ValueError(f"CUSUM reference value k must be finite and >= 0, got {k!r}")
    if not (np.isfinite(h) and h > 0):
        raise ValueError(f"CUSUM decision interval h must be finite and > 0, got {h!r}")


def _as_z(z: ArrayLike) -> NDArray[np.float64]:
    arr = np.asarray(z, dtype=float)
    if arr.ndim == 0:
        raise ValueError("z must have at least one axis (time along the last axis)")
    if not np.all(np.isfinite(arr)):
        raise ValueError("z must be finite (standardised residuals, σ units)")
    return arr


def cusum_paths(
    z: ArrayLike, k: float = CUSUM_K, h: float = CUSUM_H
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Upper and lower CUSUM statistics without reset.

    Args:
        z: standardised values, shape ``(..., n)``; time runs along the last axis, leading axes
            are independent series (vectorised).
        k: reference value, σ units.
        h: decision interval, σ units (only validated here).

    Returns:
        ``(upper, lower)``, both shape ``(..., n)``, σ units, ≥ 0.
    """
    _check_kh(k, h)
    arr = _as_z(z)
    upper = np.empty_like(arr)
    lower = np.empty_like(arr)
    cp = np.zeros(arr.shape[:-1])
    cm = np.zeros(arr.shape[:-1])
    for i in range(arr.shape[-1]):
        zi = arr[..., i]
        cp = np.maximum(0.0, zi - k + cp)
        cm = np.maximum(0.0, -zi - k + cm)
        upper[..., i] = cp
        lower[..., i] = cm
    return upper, lower


def first_alarm(z: ArrayLike, k: float = CUSUM_K, h: float = CUSUM_H) -> NDArray[np.int64]:
    """Index of the first alarm of the two-sided CUSUM along the last axis.

    Args:
        z: standardised values, shape ``(..., n)``.

    Returns:
        Integer array of shape ``(...)``: the first index with ``C⁺ > h`` or ``C⁻ > h``,
        ``-1`` where the series never signals. The run length is ``index + 1``.
    """
    upper, lower = cusum_paths(z, k, h)
    signal = (upper > h) | (lower > h)
    idx = np.argmax(signal, axis=-1)
    return np.where(signal.any(axis=-1), idx, -1).astype(np.int64)


def detect_steps(
    z: ArrayLike, k: float = CUSUM_K, h: float = CUSUM_H, *, max_steps: int | None = None
) -> list[CusumStep]:
    """All steps in one series; both sides restart from zero after each alarm.

    Args:
        z: standardised values, shape ``(n,)``.
        k: reference value, σ units.
        h: decision interval, σ units.
        max_steps: stop after this many steps (None = no limit).

    Returns:
        Steps in time order.
    """
    _check_kh(k, h)
    arr = _as_z(z)
    if arr.ndim != 1:
        raise ValueError(f"z must be one series of shape (n,), got shape {arr.shape}")
    steps: list[CusumStep] = []
    cp = cm = 0.0
    np_run = nm_run = 0  # consecutive observations with C > 0 on each side
    for i, zi in enumerate(arr):
        cp = max(0.0, float(zi) - k + cp)
        cm = max(0.0, -float(zi) - k + cm)
        np_run = np_run + 1 if cp > 0 else 0
        nm_run = nm_run + 1 if cm > 0 else 0
        if cp > h or cm > h:
            direction = 1 if cp - h >= cm - h else -1
            run = np_run if direction > 0 else nm_run
            steps.append(CusumStep(alarm_index=i, start_index=i - run + 1, direction=direction))
            if max_steps is not None and len(steps) >= max_steps:
                break
            cp = cm = 0.0
            np_run = nm_run = 0
    return steps
