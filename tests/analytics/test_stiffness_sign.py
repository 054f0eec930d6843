"""The stiffness → toe-out sign used by the fleet recompute is the corner engine's own sign.

``analytics.fleet_recompute.SignByStiffness`` decides ``toe change < 0`` from a root found once
per platform corner and link; it must agree, element by element, with evaluating the exact
function (``analytics.core.compliance.toe_change_for_link_stiffness``), including near the root
and at stiffnesses so low that the function is no longer monotonic. No database.
"""
import numpy as np
import pytest

from analytics.core.compliance import toe_change_for_link_stiffness
from analytics.core.demo_corners import demo_corner
from analytics.fleet_recompute import SignByStiffness

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
