"""From inspection findings to the model, and the what-if of measured against new."""
import pytest

from analytics.core.compliance import stability_verdict
from analytics.core.condition import (
    FINDING_STIFFNESS_FACTORS,
    LinkCondition,
    measured_corner,
    play_from_ball_joint,
    stiffness_factor,
    stiffness_from_deflection,
    what_if,
)
from analytics.core.demo_corners import demo_corner
from analytics.core.load_cases import Platform, vehicle_load_cases


def test_stiffness_is_force_over_deflection():
    # Hooke's law along the link line (assumption stated in the module)
    assert stiffness_from_deflection(2000.0, 0.8) == pytest.approx(2500.0)
    with pytest.raises(ValueError, match="^deflection_mm:"):
        stiffness_from_deflection(2000.0, 0.0)


def test_finding_factors_come_from_one_table():
    assert stiffness_factor("none") == 1.0
    assert stiffness_factor("Debonding") == FINDING_STIFFNESS_FACTORS["debonding/separation"]
    assert all(0 < v <= 1 for v in FINDING_STIFFNESS_FACTORS.values())
    with pytest.raises(ValueError, match="^finding: unknown"):
        stiffness_factor("rust")
    with pytest.raises(TypeError):
        FINDING_STIFFNESS_FACTORS["none"] = 0.5  # read-only table


def test_ball_joint_play_becomes_link_play():
    assert play_from_ball_joint(0.4) == 0.4
    with pytest.raises(ValueError, match="^play_mm:"):
        play_from_ball_joint(-0.1)


def test_measured_corner_applies_measurement_finding_and_play():
    new = demo_corner("rear", "left")
    meas = measured_corner(new, {
        "toe link": LinkCondition(finding="debonding/separation", ball_joint_play_mm=0.3),
        "spring link": LinkCondition(test_force_N=3000.0, deflection_mm=1.0, finding="cracking"),
    })
    assert meas.stiffness[4] == pytest.approx(new.stiffness[4] * 0.3)
    assert meas.stiffness[3] == pytest.approx(3000.0)  # a measurement wins over a finding
    assert meas.play[4] == 0.3 and "measured" in meas.name


def test_what_if_shows_the_worn_rear_turning_toward_toe_out_under_cornering():
    platform = Platform(front_axle_load_N=8300, rear_axle_load_N=6400, track_front_mm=1560,
                        track_rear_mm=1550, wheelbase_mm=2750, cg_height_mm=550, tyre_radius_mm=315,
                        brake_balance_front=0.7, driven_axle="front")
    cases = vehicle_load_cases(platform, outer_side="left")  # RL is the outer rear wheel
    new = demo_corner("rear", "left")
    worn = measured_corner(new, {"toe link": LinkCondition(finding="debonding/separation")})
    cmp = what_if(new, worn, cases, position="RL")
    assert [r.case for r in cmp.rows] == ["cornering", "braking", "lift-off", "braking in a turn"]
    corner_row = cmp.rows[0]
    assert corner_row.toe_change_new_deg > 0 > corner_row.toe_change_measured_deg
    assert "stable" in cmp.stability_new and "unstable" in cmp.stability_measured
    assert stability_verdict(worn).verdict == "unstable"
    assert any("default" in line for line in corner_row.assumptions)
    with pytest.raises(ValueError, match="^corner_new:"):
        what_if(new, worn, cases, position="RR")
