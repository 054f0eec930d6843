"""Fleet life of a part type: censored Weibull fit and age replacement.

Lifetimes are distances in km (the unit only has to be consistent: scale and interval come back
in the unit of the input, cost rates per that unit).

* **Weibull maximum likelihood with right-censoring** (Lawless, *Statistical Models and Methods
  for Lifetime Data*, ch. 4–5). With ``F(t) = 1 − exp(−(t/η)^β)``, failures ``t_i`` (i ∈ D,
  ``r = |D|``) and censored times (still in service / removed unfailed)::

      ℓ(β, η) = r·log β + Σ_D [β·log(t_i/η) − log t_i] − Σ_all (t_i/η)^β

  For fixed β the scale is ``η̂(β)^β = Σ_all t_i^β / r``; β̂ solves the profile equation
  ``Σ t^β log t / Σ t^β − 1/β − (1/r) Σ_D log t = 0`` (root found by Brent's method on
  log β). A finite MLE exists when ``max(log t) > mean_D(log t)``.
* **Confidence intervals** from the observed information (the analytic Hessian of −ℓ) in the
  parametrisation ``(log β, log η)``; Wald intervals there, exponentiated (so they are
  asymmetric and positive).
* **"Not enough data"**: fewer than :data:`MIN_FAILURES` failures raises :class:`NotEnoughData`.
* **Age replacement** (Barlow & Proschan, *Mathematical Theory of Reliability*, ch. 4): replace
  preventively at age T (cost ``cp``) or at failure (cost ``cf``); long-run cost per unit
  distance ``C(T) = (cp·R(T) + cf·F(T)) / ∫₀ᵀ R(t) dt``. For β > 1 and cf > cp the optimum solves
  ``h(T)·∫₀ᵀ R − F(T) = cp / (cf − cp)``; for β ≤ 1 (or cf ≤ cp) there is no finite optimum and
  preventive replacement does not pay: run to failure at ``cf / mean life``.

Pure numpy/scipy; no Django.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, special, stats

__all__ = [
    "LIFE_MODEL",
    "MIN_FAILURES",
    "AgeReplacement",
    "NotEnoughData",
    "WeibullFit",
    "age_replacement",
    "age_replacement_cost_rate",
    "fit_weibull",
    "weibull_log_likelihood",
]

#: Fewest failures for a Weibull fit; below this the answer is "not enough data".
MIN_FAILURES: int = 3
#: Bracket for log β when solving the profile equation (β from e^-8 to e^8).
LOG_SHAPE_BRACKET: tuple[float, float] = (-8.0, 8.0)
#: Absolute tolerance on log β for the profile root.
LOG_SHAPE_XTOL: float = 1e-12
#: Relative tolerance on T/η for the age-replacement root.
INTERVAL_RTOL: float = 1e-12
LIFE_MODEL: str = "Weibull, right-censored maximum likelihood (Lawless)"


class NotEnoughData(ValueError):
    """Fewer failures than :data:`MIN_FAILURES`: no life model is fitted."""


@dataclass(frozen=True)
class WeibullFit:
    """A Weibull life model.

    Attributes:
        shape: β̂ (dimensionless).
        scale: η̂ (km).
        log_likelihood: ℓ(β̂, η̂) including the ``−log t`` Jacobian terms (the density of t).
        shape_ci, scale_ci: ``(low, high)`` Wald intervals on the log scale, exponentiated.
        covariance_log: 2×2 covariance of ``(log β̂, log η̂)`` (inverse observed information).
        confidence: two-sided level of the intervals.
        failures, censored: counts.
    """

    shape: float
    scale: float
    log_likelihood: float
    shape_ci: tuple[float, float]
    scale_ci: tuple[float, float]
    covariance_log: tuple[tuple[float, float], tuple[float, float]]
    confidence: float
    failures: int
    censored: int

    @property
    def mean_life(self) -> float:
        """``η·Γ(1 + 1/β)`` (km)."""
        return self.scale * math.gamma(1.0 + 1.0 / self.shape)


def _check_life_data(
    distance: ArrayLike, failed: ArrayLike
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    t = np.asarray(distance, dtype=float)
    f = np.asarray(failed)
    if t.ndim != 1 or f.shape != t.shape:
        raise ValueError(f"distance and failed must both have shape (n,), got {t.shape}, {f.shape}")
    if not np.all(np.isfinite(t)):
        raise ValueError("distances must be finite")
    if np.any(t <= 0):
        raise ValueError("distances must be > 0")
    if f.dtype != bool:
        if not np.all(np.isin(f, (0, 1))):
            raise ValueError("failed must be 0/1 or boolean")
        f = f.astype(bool)
    return t, f


def weibull_log_likelihood(
    shape: float, scale: float, distance: ArrayLike, failed: ArrayLike
) -> float:
    """ℓ(β, η) for right-censored data (failures: log density, censored: log survival)."""
    t, f = _check_life_data(distance, failed)
    if not (shape > 0 and scale > 0):
        raise ValueError("shape and scale must be > 0")
    w = np.log(t) - math.log(scale)
    s = np.exp(shape * w)
    return float(
        f.sum() * math.log(shape) + np.sum(shape * w[f] - np.log(t[f])) - np.sum(s)
    )


def _hessian_log(
    beta: float, scale: float, t: NDArray[np.float64], f: NDArray[np.bool_]
) -> NDArray[np.float64]:
    """Hessian of ℓ in (a = log β, u = log η)."""
    w = np.log(t) - math.log(scale)
    s = np.exp(beta * w)
    r = float(f.sum())
    h_aa = beta * np.sum(w[f]) - beta * np.sum(w * s) - beta**2 * np.sum(w**2 * s)
    h_uu = -(beta**2) * np.sum(s)
    h_au = beta * (-r + np.sum(s) + beta * np.sum(w * s))
    return np.array([[h_aa, h_au], [h_au, h_uu]])


def fit_weibull(
    distance: ArrayLike, failed: ArrayLike, *, confidence: float = 0.95
) -> WeibullFit:
    """Right-censored Weibull MLE.

    Args:
        distance: shape ``(n,)``, distance at failure or at censoring (km, > 0).
        failed: shape ``(n,)``, 1/True = failed, 0/False = still in service or removed unfailed.
        confidence: two-sided level of the intervals.

    Raises:
        NotEnoughData: fewer than :data:`MIN_FAILURES` failures.
        ValueError: bad inputs, or no finite MLE (e.g. every failure at the longest distance).
    """
    if not (0.0 < confidence < 1.0):
        raise ValueError("confidence must be in (0, 1)")
    t, f = _check_life_data(distance, failed)
    r = int(f.sum())
    if r < MIN_FAILURES:
        raise NotEnoughData(
            f"not enough data: {r} failure(s), at least {MIN_FAILURES} are needed"
        )
    # Work with t / max(t) for numerical range; the scale is restored afterwards.
    tmax = float(t.max())
    lt = np.log(t / tmax)  # ≤ 0
    mean_lf = float(lt[f].mean())
    if not (lt.max() > mean_lf + 1e-12):
        raise ValueError("the shape cannot be estimated: all failures at the longest distance")

    def profile(a: float) -> float:
        beta = math.exp(a)
        wts = np.exp(beta * lt)  # ≤ 1, no overflow
        return float(np.sum(wts * lt) / np.sum(wts) - 1.0 / beta - mean_lf)

    lo, hi = LOG_SHAPE_BRACKET
    if not (profile(lo) < 0 < profile(hi)):
        raise ValueError("the shape is outside the supported range e^-8 .. e^8")
    a_hat = optimize.brentq(profile, lo, hi, xtol=LOG_SHAPE_XTOL)
    beta = math.exp(a_hat)
    scale = tmax * float(np.sum(np.exp(beta * lt)) / r) ** (1.0 / beta)

    hess = _hessian_log(beta, scale, t, f)
    cov = np.linalg.inv(-hess)
    z = float(stats.norm.ppf(0.5 + confidence / 2.0))
    se_a, se_u = math.sqrt(cov[0, 0]), math.sqrt(cov[1, 1])
    return WeibullFit(
        shape=beta,
        scale=scale,
        log_likelihood=weibull_log_likelihood(beta, scale, t, f),
        shape_ci=(beta * math.exp(-z * se_a), beta * math.exp(z * se_a)),
        scale_ci=(scale * math.exp(-z * se_u), scale * math.exp(z * se_u)),
        covariance_log=((float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))),
        confidence=confidence,
        failures=r,
        censored=int(t.size - r),
    )


# --------------------------------------------------------------------------- age replacement


@dataclass(frozen=True)
class AgeReplacement:
    """Age-replacement policy (Barlow & Proschan).

    Attributes:
        interval: optimal replacement age T* (km), or None when no finite optimum exists.
        cost_rate: cost per km at T* (or the run-to-failure rate when ``interval`` is None).
        run_to_failure_cost_rate: ``cf / mean life`` (cost per km).
        pays: True when preventive replacement at T* beats running to failure.
        reason: plain-words explanation.
    """

    interval: float | None
    cost_rate: float
    run_to_failure_cost_rate: float
    pays: bool
    reason: str


def _check_costs(preventive_cost: float, failure_cost: float) -> None:
    for name, v in (("preventive_cost", preventive_cost), ("failure_cost", failure_cost)):
        if not (math.isfinite(v) and v > 0):
            raise ValueError(f"{name} must be finite and > 0, got {v!r}")


def _std_integral(x: NDArray[np.float64] | float, beta: float) -> NDArray[np.float64]:
    """∫₀ˣ exp(−u^β) du = Γ(1 + 1/β)·P(1/β, x^β) (P: regularised lower incomplete gamma)."""
    xa = np.asarray(x, dtype=float)
    return special.gamma(1.0 + 1.0 / beta) * special.gammainc(1.0 / beta, xa**beta)


def age_replacement_cost_rate(
    interval: ArrayLike, *, shape: float, scale: float, preventive_cost: float, failure_cost: float
) -> NDArray[np.float64]:
    """``C(T) = (cp·R(T) + cf·F(T)) / ∫₀ᵀ R(t) dt`` for Weibull(β, η), any shape of T (km, > 0)."""
    _check_costs(preventive_cost, failure_cost)
    if not (shape > 0 and scale > 0):
        raise ValueError("shape and scale must be > 0")
    t = np.asarray(interval, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t <= 0):
        raise ValueError("intervals must be finite and > 0")
    x = t / scale
    rel = np.exp(-(x**shape))
    return (preventive_cost * rel + failure_cost * (1.0 - rel)) / (scale * _std_integral(x, shape))


def age_replacement(
    *, shape: float, scale: float, preventive_cost: float, failure_cost: float
) -> AgeReplacement:
    """Optimal age-replacement interval for Weibull(β, η) lives.

    Args:
        shape: β (> 0). scale: η (km, > 0).
        preventive_cost, failure_cost: cost of one planned / one failure replacement (> 0).
    """
    _check_costs(preventive_cost, failure_cost)
    if not (math.isfinite(shape) and shape > 0 and math.isfinite(scale) and scale > 0):
        raise ValueError("shape and scale must be finite and > 0")
    mean = scale * math.gamma(1.0 + 1.0 / shape)
    rtf = failure_cost / mean
    if shape <= 1.0:
        return AgeReplacement(
            None, rtf, rtf, False,
            "no finite optimum: the failure rate does not rise (shape <= 1), so preventive "
            "replacement does not pay",
        )
    if failure_cost <= preventive_cost:
        return AgeReplacement(
            None, rtf, rtf, False,
            "no finite optimum: a failure costs no more than a planned replacement",
        )
    target = preventive_cost / (failure_cost - preventive_cost)

    def condition(x: float) -> float:
        hazard = shape * x ** (shape - 1.0)
        return float(hazard * _std_integral(x, shape) - (1.0 - math.exp(-(x**shape))) - target)

    hi = 1.0
    while condition(hi) <= 0:
        hi *= 2.0
        if hi > 1e6:
            raise ValueError("age-replacement optimum not bracketed")
    x_star = optimize.brentq(condition, 1e-300, hi, rtol=INTERVAL_RTOL)
    interval = x_star * scale
    rate = float(
        age_replacement_cost_rate(
            interval,
            shape=shape,
            scale=scale,
            preventive_cost=preventive_cost,
            failure_cost=failure_cost,
        )
    )
    return AgeReplacement(
        interval, rate, rtf, rate < rtf,
        "replace preventively at this age: the failure rate rises (shape > 1)",
    )
