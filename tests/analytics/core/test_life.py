"""Fleet life: censored Weibull maximum likelihood and age replacement."""

import math

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from analytics.core.life import (
    MIN_FAILURES,
    NotEnoughData,
    age_replacement,
    age_replacement_cost_rate,
    fit_weibull,
    weibull_log_likelihood,
)


def censored_sample(seed, n=60, shape=1.8, scale=60000.0):
    rng = np.random.default_rng(seed)
    life = stats.weibull_min.rvs(shape, scale=scale, size=n, random_state=rng)
    removed = rng.uniform(0.3 * scale, 2.0 * scale, n)  # still in service / removed unfailed
    return np.minimum(life, removed), life <= removed


# --------------------------------------------------------------------- age replacement


def test_age_replacement_reference_case():
    # computed from Barlow & Proschan's cost-rate formula (Mathematical Theory of Reliability,
    # age replacement): Weibull shape 2, scale 1, cp 1, cf 10
    plan = age_replacement(shape=2.0, scale=1.0, preventive_cost=1.0, failure_cost=10.0)
    assert plan.interval == pytest.approx(0.3365, abs=5e-5)
    assert plan.cost_rate == pytest.approx(6.056, abs=5e-4)
    assert plan.run_to_failure_cost_rate == pytest.approx(11.284, abs=5e-4)
    assert plan.pays


def test_age_replacement_optimum_is_the_minimum_of_the_cost_rate():
    kw = dict(shape=2.7, scale=80000.0, preventive_cost=150.0, failure_cost=900.0)
    plan = age_replacement(**kw)

    def rate(t):
        return float(age_replacement_cost_rate(t, **kw))

    # reference: direct numerical minimisation, scipy.optimize.minimize_scalar
    ref = optimize.minimize_scalar(rate, bounds=(1000.0, 300000.0), method="bounded",
                                   options={"xatol": 1e-3})
    assert plan.interval == pytest.approx(ref.x, rel=1e-4)
    assert plan.cost_rate == pytest.approx(ref.fun, rel=1e-9)


def test_cost_rate_denominator_matches_numerical_integration():
    shape, scale, t = 1.7, 5.0, 3.2
    # reference: scipy.integrate.quad of R(t) = exp(−(t/η)^β)
    integral, _ = integrate.quad(lambda u: math.exp(-((u / scale) ** shape)), 0.0, t)
    rel = math.exp(-((t / scale) ** shape))
    expected = (2.0 * rel + 7.0 * (1 - rel)) / integral
    got = age_replacement_cost_rate(t, shape=shape, scale=scale, preventive_cost=2.0,
                                    failure_cost=7.0)
    assert float(got) == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("shape", [0.7, 1.0])
def test_no_finite_optimum_when_the_failure_rate_does_not_rise(shape):
    plan = age_replacement(shape=shape, scale=1.0, preventive_cost=1.0, failure_cost=10.0)
    assert plan.interval is None and not plan.pays and "does not pay" in plan.reason
    assert plan.cost_rate == pytest.approx(10.0 / math.gamma(1 + 1 / shape))


def test_no_finite_optimum_when_a_failure_costs_no_more_than_a_plan():
    plan = age_replacement(shape=3.0, scale=1.0, preventive_cost=5.0, failure_cost=5.0)
    assert plan.interval is None


def test_costs_must_be_positive():
    with pytest.raises(ValueError, match="preventive_cost"):
        age_replacement(shape=2.0, scale=1.0, preventive_cost=0.0, failure_cost=1.0)


# --------------------------------------------------------------------- Weibull fit


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_censored_mle_matches_scipy(seed):
    t, failed = censored_sample(seed)
    fit = fit_weibull(t, failed)
    # reference: scipy.stats.weibull_min.fit on scipy.stats.CensoredData, floc=0
    data = stats.CensoredData(uncensored=t[failed], right=t[~failed])
    c, _, scale = stats.weibull_min.fit(data, floc=0)
    assert fit.shape == pytest.approx(c, rel=1e-5)
    assert fit.scale == pytest.approx(scale, rel=1e-5)
    ref_ll = (stats.weibull_min.logpdf(t[failed], c, scale=scale).sum()
              + stats.weibull_min.logsf(t[~failed], c, scale=scale).sum())
    assert fit.log_likelihood >= ref_ll - 1e-8  # ours is at least as high (it is the maximum)
    assert fit.log_likelihood == pytest.approx(ref_ll, abs=1e-6)
    assert fit.failures == failed.sum() and fit.censored == (~failed).sum()


def test_log_likelihood_matches_scipy_densities():
    t, failed = censored_sample(5, n=20)
    # reference: scipy.stats.weibull_min.logpdf / logsf (Lawless ch. 4: censored likelihood)
    ref = (stats.weibull_min.logpdf(t[failed], 1.3, scale=50000.0).sum()
           + stats.weibull_min.logsf(t[~failed], 1.3, scale=50000.0).sum())
    assert weibull_log_likelihood(1.3, 50000.0, t, failed) == pytest.approx(ref, rel=1e-12)


def test_covariance_is_the_inverse_of_a_numerical_hessian_on_the_log_scale():
    t, failed = censored_sample(6)
    fit = fit_weibull(t, failed)
    a0, u0 = math.log(fit.shape), math.log(fit.scale)

    def nll(a, u):
        return -weibull_log_likelihood(math.exp(a), math.exp(u), t, failed)

    h = 1e-4
    haa = (nll(a0 + h, u0) - 2 * nll(a0, u0) + nll(a0 - h, u0)) / h**2
    huu = (nll(a0, u0 + h) - 2 * nll(a0, u0) + nll(a0, u0 - h)) / h**2
    hau = (nll(a0 + h, u0 + h) - nll(a0 + h, u0 - h) - nll(a0 - h, u0 + h)
           + nll(a0 - h, u0 - h)) / (4 * h**2)
    cov = np.linalg.inv([[haa, hau], [hau, huu]])
    np.testing.assert_allclose(np.array(fit.covariance_log), cov, rtol=1e-3)
    lo, hi = fit.shape_ci
    assert lo < fit.shape < hi and math.log(hi / fit.shape) == pytest.approx(
        math.log(fit.shape / lo), rel=1e-12)  # symmetric on the log scale


def test_shape_interval_covers_the_truth_at_about_its_level():
    covered = sum(
        (lambda f: f.shape_ci[0] <= 1.8 <= f.shape_ci[1])(fit_weibull(*censored_sample(s, n=50)))
        for s in range(300)
    )
    assert 0.90 <= covered / 300 <= 0.98


def test_scale_follows_the_unit_and_shape_does_not():
    t, failed = censored_sample(8)
    a, b = fit_weibull(t, failed), fit_weibull(t / 1.609344, failed)
    assert b.shape == pytest.approx(a.shape, rel=1e-9)
    assert b.scale == pytest.approx(a.scale / 1.609344, rel=1e-9)


def test_too_few_failures_is_not_enough_data():
    t = np.array([1000.0, 2000.0, 3000.0, 4000.0, 5000.0])
    failed = np.array([1, 1, 0, 0, 0])
    assert failed.sum() < MIN_FAILURES
    with pytest.raises(NotEnoughData, match="not enough data"):
        fit_weibull(t, failed)


def test_life_data_are_checked():
    with pytest.raises(ValueError, match="> 0"):
        fit_weibull([-1.0, 2.0, 3.0], [1, 1, 1])
    with pytest.raises(ValueError, match="0/1"):
        fit_weibull([1.0, 2.0, 3.0], [1, 2, 1])
    with pytest.raises(ValueError, match="longest"):
        fit_weibull([5.0, 5.0, 5.0, 1.0], [1, 1, 1, 0])
