"""Load cases of DESIGN.md §5 from a platform's numbers."""
import numpy as np
import pytest

from analytics.core.load_cases import (
    G_MPS2,
    Platform,
    axle_load_N_from_kg,
    braking,
    braking_in_turn,
    cornering,
    lift_off,
    vehicle_load_cases,
)


@pytest.fixture
def platform():
    return Platform(front_axle_load_N=axle_load_N_from_kg(850), rear_axle_load_N=axle_load_N_from_kg(650),
                    track_front_mm=1560, track_rear_mm=1550, wheelbase_mm=2750, cg_height_mm=550,
                    tyre_radius_mm=315, brake_balance_front=0.7, driven_axle="front")


def test_cornering_forces_balance_the_lateral_acceleration_and_load_the_outer_side(platform):
    # Newton's second law: Σ Fy = M·a_y, Σ Fz = weight (rigid body, steady state)
    case = cornering(platform, outer_side="right")
    f = case.forces_N
    assert f[:, 1].sum() == pytest.approx(0.5 * platform.weight_N)
    assert f[:, 2].sum() == pytest.approx(platform.weight_N)
    assert np.all(f[:, 1] > 0)  # left turn: toward the turn centre = +y
    assert f[1, 2] > f[0, 2] and f[3, 2] > f[2, 2]  # FR, RR are outer
    # lateral load transfer of the front axle = W_f·(a_y/g)·h/track (common practice, no source)
    assert f[1, 2] - f[0, 2] == pytest.approx(2 * platform.front_axle_load_N * 0.5 * 550 / 1560)
    assert "lateral acceleration: 0.5 g (default)" in case.assumption_lines()


def test_the_outer_side_decides_the_direction_of_the_lateral_forces(platform):
    left = cornering(platform, outer_side="left", lateral_g=0.3)
    right = cornering(platform, outer_side="right", lateral_g=0.3)
    np.testing.assert_allclose(left.forces_N[:, 1], -right.forces_N[[1, 0, 3, 2], 1])
    assert "lateral acceleration: 0.3 g" in left.assumption_lines()
    with pytest.raises(ValueError, match="^outer_side:"):
        cornering(platform, outer_side="inner")


def test_braking_uses_the_brake_balance_and_transfers_load_forward(platform):
    # Σ Fx = −M·a_x split by brake balance; ΔFz = M·a_x·h/L (common practice, no source)
    case = braking(platform)
    f = case.forces_N
    assert f[:, 0].sum() == pytest.approx(-0.6 * platform.weight_N)
    assert f[:2, 0].sum() / f[:, 0].sum() == pytest.approx(0.7)
    transfer = 0.6 * platform.weight_N * 550 / 2750
    assert f[:2, 2].sum() == pytest.approx(platform.front_axle_load_N + transfer)
    assert case.acts_at == "contact patch"
    np.testing.assert_allclose(case.delta_forces_N[:, 2].sum(), 0.0, atol=1e-9)


def test_lift_off_acts_on_the_driven_axle_only(platform):
    case = lift_off(platform)
    assert case.forces_N[:2, 0].sum() == pytest.approx(-0.15 * platform.weight_N)
    np.testing.assert_array_equal(case.forces_N[2:, 0], 0.0)
    rear = lift_off(Platform(**{**platform.__dict__, "driven_axle": "rear"}))
    np.testing.assert_array_equal(rear.forces_N[:2, 0], 0.0)


def test_braking_in_a_turn_has_both_components(platform):
    case = braking_in_turn(platform, outer_side="left")
    assert case.forces_N[:, 0].sum() == pytest.approx(-0.6 * platform.weight_N)
    assert case.forces_N[:, 1].sum() == pytest.approx(-0.5 * platform.weight_N)
    assert case.forces_N[:, 2].sum() == pytest.approx(platform.weight_N)
    names = [c.name for c in vehicle_load_cases(platform, outer_side="right")]
    assert names == ["cornering", "braking", "lift-off", "braking in a turn"]


def test_kg_become_newtons_with_standard_gravity():
    # standard gravity 9.80665 m/s² (CGPM 1901)
    assert axle_load_N_from_kg(1000) == pytest.approx(1000 * G_MPS2)


@pytest.mark.parametrize("field,value", [("track_front_mm", 0), ("cg_height_mm", float("nan")),
                                         ("brake_balance_front", 1.2), ("driven_axle", "middle")])
def test_bad_platform_numbers_are_refused_by_name(platform, field, value):
    with pytest.raises(ValueError, match=f"^{field}:"):
        Platform(**{**platform.__dict__, field: value})


def test_wheel_lift_is_reported(platform):
    case = cornering(platform, outer_side="right", lateral_g=1.6)
    assert "FL" in case.wheel_lift and np.all(case.forces_N[:, 2] >= 0)
