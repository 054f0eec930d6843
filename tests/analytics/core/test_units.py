"""Alignment units and conventions (DESIGN.md §3)."""
import numpy as np
import pytest

from analytics.core import units


def test_one_mm_of_linear_toe_at_381_mm_is_0_1504_degrees():
    # x = D·sin θ (DESIGN.md §3); check value computed from the equation in the issue
    deg = units.toe_from_linear(1.0, 381.0)
    assert deg == pytest.approx(0.1504, abs=5e-5)
    sign, whole, minutes = units.deg_to_dm(deg)
    assert (sign, whole) == (1, 0)
    assert minutes == pytest.approx(9.02, abs=5e-3)


def test_a_total_of_0_2_degrees_at_406_4_mm_is_1_419_mm():
    # x = D·sin θ per wheel, total = sum of both wheels (ISO 8855); check value from the issue
    assert units.total_linear_from_toe(0.2, 406.4) == pytest.approx(1.419, abs=5e-4)


def test_linear_toe_round_trips_over_random_angles():
    rng = np.random.default_rng(3)
    toe = rng.uniform(-2, 2, 50)
    d = rng.uniform(300, 800, 50)
    back = units.toe_from_linear(units.linear_from_toe(toe, d), d)
    np.testing.assert_allclose(back, toe, atol=1e-12)


def test_inches_and_miles_use_the_international_definitions():
    # 1 in = 25.4 mm and 1 mile = 1.609344 km exactly (international yard and pound, 1959)
    assert units.mm_from_inches(1.0) == 25.4
    assert units.km_from_miles(100.0) == pytest.approx(160.9344, abs=1e-12)
    assert units.miles_from_km(units.km_from_miles(12345.6)) == pytest.approx(12345.6)


def test_thrust_angle_is_half_the_rear_toe_difference_and_points_right_when_positive():
    # DESIGN.md §3: thrust = (toe_RL − toe_RR)/2, positive = thrust line right of centreline
    assert units.thrust_angle(0.3, 0.1) == pytest.approx(0.1)
    assert "right" in units.thrust_angle.__doc__
    assert units.total_toe(0.1, 0.05) == pytest.approx(0.15)


def test_cross_camber_and_cross_caster_are_left_minus_right():
    assert units.cross_camber(-0.5, -1.0) == pytest.approx(0.5)
    assert units.cross_caster(6.0, 6.5) == pytest.approx(-0.5)


@pytest.mark.parametrize("text,expected", [
    ("0°12'", 0.2), ("-0°12'", -0.2), ("1° 30′", 1.5), ("12'", 0.2), ("0.25", 0.25),
    ("-0.25°", -0.25), ("−1°06'", -1.1),
])
def test_angles_are_read_in_the_ways_technicians_write_them(text, expected):
    assert units.parse_angle(text) == pytest.approx(expected)


def test_formatted_angles_read_back_to_the_shown_precision():
    rng = np.random.default_rng(11)
    for a in rng.uniform(-3, 3, 40):
        assert units.parse_angle(units.format_angle(a, decimals=1)) == pytest.approx(a, abs=0.1 / 60)
        assert units.parse_angle(units.format_angle(a, "deg", 3)) == pytest.approx(a, abs=5e-4)


def test_degrees_and_minutes_round_trip():
    for a in (-1.2345, 0.0, 0.5, 2.999999):
        assert units.dm_to_deg(*units.deg_to_dm(a)) == pytest.approx(a, abs=1e-9)


@pytest.mark.parametrize("call,name", [
    (lambda: units.toe_from_linear(1.0, 0.0), "diameter_mm"),
    (lambda: units.toe_from_linear(500.0, 400.0), "x_mm"),
    (lambda: units.linear_from_toe(float("nan"), 400.0), "toe_deg"),
    (lambda: units.km_from_miles(-1), "miles"),
    (lambda: units.dm_to_deg(1, 0, 61), "minutes"),
    (lambda: units.parse_angle("abc"), "angle"),
    (lambda: units.format_angle(1.0, "rad"), "style"),
])
def test_bad_input_names_the_argument(call, name):
    with pytest.raises(ValueError, match=f"^{name}:"):
        call()
