"""Shrink one vehicle's drift slope toward a stored platform pooled rate.

Same normal–normal empirical-Bayes posterior as :func:`analytics.core.drift.shrink_slopes`,
applied to one vehicle with the pooled mean μ̂, its variance Var(μ̂) and the between-vehicle
variance τ² kept from the last fleet recompute: ``B = v / (v + τ²)``, slope
``μ̂ + (1 − B)(b − μ̂)``, variance ``(1 − B)·v + B²·Var(μ̂)``. Units are those of the slope
(deg/km).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Shrunk", "shrink_toward"]


@dataclass(frozen=True)
class Shrunk:
    slope: float
    slope_se: float
    weight_on_pooled: float


def shrink_toward(slope: float | None, variance: float, *, mean: float, mean_se: float,
                  tau2: float) -> Shrunk:
    """Posterior slope for one vehicle; ``slope`` None (or variance inf) → the pooled rate."""
    if not (math.isfinite(mean) and math.isfinite(mean_se) and math.isfinite(tau2)):
        raise ValueError("pooled mean, mean_se and tau2 must be finite")
    var_mu = mean_se**2
    if slope is None or not math.isfinite(slope) or not math.isfinite(variance):
        return Shrunk(mean, math.sqrt(tau2 + var_mu), 1.0)
    if variance <= 0:
        raise ValueError("variance must be > 0")
    b = variance / (variance + tau2) if (variance + tau2) > 0 else 1.0
    post = mean + (1.0 - b) * (slope - mean)
    var = (1.0 - b) * variance + b * b * var_mu
    return Shrunk(post, math.sqrt(var), b)
