"""The stiffness → toe-out sign used by the fleet recompute is the corner engine's own sign.

``analytics.core.stiffness_sign.SignByStiffness`` decides ``toe change < 0`` from a root found once
per platform corner and link; it must agree, element by element, with evaluating the exact
function (``analytics.core.compliance.toe_change_for_link_stiffness``), including near the root
and at stiffnesses so low that the function is no longer monotonic. No database.
"""
import numpy as np
import pytest

from analytics.core.compliance import toe_change_for_link_stiffness
from analytics.core.demo_corners import demo_corner
from analytics.core.stiffness_sign import SignByStiffness

FORCE = np.array([0.0, -3500.0, 0.0])  # N, inboard on a left outer rear wheel


@pytest.mark.parametrize("link", ["toe link", "spring link", "upper front", "lower front"])
def test_the_sign_by_root_equals_the_exact_sign_everywhere(link):
    corner = demo_corner("rear", "left")

    def fn(k):
        k = np.asarray(k, dtype=float)
        return toe_change_for_link_stiffness(corner, FORCE, link, k.ravel()).reshape(k.shape)

    sign = SignByStiffness(fn)
    rng = np.random.default_rng(3)
    k = np.exp(rng.uniform(np.log(0.2), np.log(5e6), size=(300, 40)))  # N/mm, beyond both ends
    if sign.root is not None:  # crowd the root: relative offsets down to 1e-13
        near = sign.root * (1.0 + np.concatenate([-np.logspace(-13, -2, 30), np.logspace(-13, -2, 30)]))
        k = np.concatenate([k.ravel(), near])
    np.testing.assert_array_equal(sign(k), fn(k) < 0.0)


def test_a_function_without_a_monotonic_range_is_evaluated_exactly():
    def wavy(k):  # sign changes many times: nothing may be decided by a root
        return np.sin(np.log(np.asarray(k, dtype=float)) * 7.0)

    sign = SignByStiffness(wavy)
    k = np.geomspace(0.5, 2e6, 5000)
    np.testing.assert_array_equal(sign(k), wavy(k) < 0.0)


@pytest.mark.parametrize("link", ["toe link", "spring link", "upper front"])
def test_three_samples_decide_a_band_as_all_of_its_samples_do(link):
    """``band_fails`` against evaluating every sample of every band with the sign itself,
    including bands with a sample exactly at (and within a hair of) the zero, bands reaching
    below the monotonic range or above its top, and bands of zero width."""
    from analytics.core.wear import BAND_SAMPLES

    corner = demo_corner("rear", "left")

    def fn(k):
        k = np.asarray(k, dtype=float)
        return toe_change_for_link_stiffness(corner, FORCE, link, k.ravel()).reshape(k.shape)

    sign = SignByStiffness(fn)
    u = np.linspace(-1.0, 1.0, BAND_SAMPLES)
    rng = np.random.default_rng(11)
    centre = np.log(sign.root) if sign.root is not None else np.log(500.0)
    mid = centre + rng.normal(0.0, 2.0, 4000)
    half = np.abs(rng.normal(0.0, 1.0, 4000))
    # a sample exactly at the zero and a hair beside it: sample i = 2 at ln(root)·(1 + ε)
    eps = np.concatenate([[0.0], np.logspace(-15, -6, 20), -np.logspace(-15, -6, 20)])
    h2 = np.abs(rng.normal(0.0, 0.5, eps.size))
    mid = np.concatenate([mid, centre * (1.0 + eps) - u[2] * h2, [centre, np.log(2.0), 0.0],
                          [np.log(3e6), np.log(0.5)]])
    half = np.concatenate([half, h2, [0.0, 1.5, 0.0], [0.5, 0.3]])
    samples = sign(np.exp(mid[:, None] + u * half[:, None]))
    f_any, f_c, f_all = sign.band_fails(mid, half, u)
    np.testing.assert_array_equal(f_any, samples.any(axis=1))
    np.testing.assert_array_equal(f_c, samples[:, BAND_SAMPLES // 2])
    np.testing.assert_array_equal(f_all, samples.all(axis=1))
    assert f_any.any() and not f_all.all()  # failing and clear bands alike
    # and in the shape the search uses: (rows, block columns)
    got = sign.band_fails(mid[:4000].reshape(100, 40), half[:4000].reshape(100, 40), u)
    np.testing.assert_array_equal(got[0].ravel(), f_any[:4000])
