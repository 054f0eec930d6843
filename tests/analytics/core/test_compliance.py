"""Linear elastokinematics with the wheel-centre height held (DESIGN.md §4)."""
import numpy as np
import pytest
from scipy.optimize import least_squares, minimize
from scipy.spatial.transform import Rotation

from analytics.core.compliance import (
    compliance_matrix,
    load_response,
    play_bands,
    play_sensitivity,
    stability_verdict,
)
from analytics.core.condition import stiffness_factor
from analytics.core.corner_file import with_links
from analytics.core.demo_corners import demo_corner
from analytics.core.wheel_angles import toe_camber_deg

from .corner_fixtures import lateral_pair_corner


def test_planar_lateral_links_match_statics_by_hand():
    # statics by hand (common practice, no source): links at x = ±100 mm, force 3 kN 30 mm behind
    # the centre → 1950 N rear, 1050 N front; deflections 0.65/0.35 mm at 3000 N/mm
    res = load_response(lateral_pair_corner(3000.0), [0.0, 3000.0, 0.0])
    forces = res.member_forces(0)
    assert forces["rear lateral"] == pytest.approx(1950.0, abs=1e-6)
    assert forces["front lateral"] == pytest.approx(1050.0, abs=1e-6)
    assert res.displacement_mm[0, 1] == pytest.approx(0.50, abs=1e-6)
    # the rear moves further outboard: yaw toward the rear link's side, i.e. toe-in on a left wheel
    assert res.toe_change_deg[0] == pytest.approx(0.0859, abs=5e-5)
    assert np.degrees(res.rotation_rad[0, 2]) == pytest.approx(-0.0859, abs=5e-5)


def test_softer_rear_lateral_bush_turns_the_wheel_further():
    # statics by hand (common practice, no source): rear 1500 N/mm → 1.30/0.35 mm
    res = load_response(lateral_pair_corner(1500.0), [0.0, 3000.0, 0.0])
    assert res.member_forces(0)["rear lateral"] == pytest.approx(1950.0, abs=1e-6)
    assert res.toe_change_deg[0] == pytest.approx(0.272, abs=5e-4)
    assert res.displacement_mm[0, 1] == pytest.approx(0.825, abs=1e-6)


@pytest.mark.parametrize("axle", ["front", "rear"])
def test_compliance_matrix_is_symmetric_and_positive_semidefinite(axle):
    # Maxwell–Betti reciprocity (linear elasticity): C = Cᵀ, C ⪰ 0
    c = compliance_matrix(demo_corner(axle, "left"))
    assert np.max(np.abs(c - c.T)) <= 1e-12 * np.max(np.abs(c))
    assert np.min(np.linalg.eigvalsh(c)) >= -1e-12 * np.max(np.abs(c))


def test_members_balance_the_applied_load():
    # equilibrium of the carrier: Σ f_i line_i + vertical reaction = applied wrench (statics)
    corner = demo_corner("front", "left")
    rng = np.random.default_rng(5)
    forces = rng.normal(0, 2000, (7, 3))
    res = load_response(corner, forces)
    e = (corner.carrier - corner.chassis) / corner.link_lengths[:, None]
    for i in range(7):
        total_f = res.member_forces_N[i] @ e + [0, 0, res.vertical_reaction_N[i]]
        np.testing.assert_allclose(total_f, forces[i], atol=1e-6)
        moment = np.cross(corner.carrier - corner.wheel_centre, res.member_forces_N[i][:, None] * e).sum(0)
        np.testing.assert_allclose(moment, np.cross(corner.contact_patch - corner.wheel_centre, forces[i]),
                                   atol=1e-4)


def test_a_stack_of_forces_gives_the_same_as_one_at_a_time():
    corner = demo_corner("rear", "left")
    forces = np.random.default_rng(8).normal(0, 3000, (5, 3))
    stacked = load_response(corner, forces)
    for i, f in enumerate(forces):
        single = load_response(corner, f)
        assert single.toe_change_deg[0] == pytest.approx(stacked.toe_change_deg[i], abs=1e-12)


def _energy_equilibrium(corner, force):
    """Pose minimising the springs' energy minus the load's work, wheel-centre height held.

    Independent of the module: scipy's Rotation and minimize (Powell) as the reference.
    Variables: wheel-centre x, y (µm) and rotation vector (µrad)."""
    c0 = np.array(corner.wheel_centre)
    rel = np.array(corner.carrier) - c0
    patch = np.array(corner.contact_patch) - c0
    chassis, k, length = np.array(corner.chassis), np.array(corner.stiffness), corner.link_lengths

    def energy(x):
        t = np.array([x[0], x[1], 0.0]) * 1e-3
        rot = Rotation.from_rotvec(x[2:] * 1e-6)
        q = c0 + t + rot.apply(rel)
        stretch = np.linalg.norm(q - chassis, axis=1) - length
        work = force @ (t + rot.apply(patch) - patch)
        return 0.5 * np.sum(k * stretch**2) - work

    sol = minimize(energy, np.zeros(5), method="Powell",
                   options={"xtol": 1e-10, "ftol": 1e-15, "maxfev": 200000})
    assert sol.success
    rot = Rotation.from_rotvec(sol.x[2:] * 1e-6)
    return toe_camber_deg(rot.apply(np.array(corner.spin_axis))), sol.x[:2] * 1e-3


@pytest.mark.parametrize("axle,force", [("rear", [0.0, -300.0, 0.0]), ("rear", [-300.0, 0.0, 0.0]),
                                        ("front", [0.0, -300.0, 0.0])])
def test_linear_compliance_matches_a_finite_difference_of_the_nonlinear_equilibrium(axle, force):
    # the nonlinear equilibrium (minimum of spring energy minus work of the load) at a small load,
    # central difference ±F; the linear model must agree within 1 %
    corner = demo_corner(axle, "left")
    force = np.array(force)
    (tp, cp), up = _energy_equilibrium(corner, force)
    (tm, cm), um = _energy_equilibrium(corner, -force)
    lin = load_response(corner, force)
    assert lin.toe_change_deg[0] == pytest.approx((tp - tm) / 2, rel=0.01)
    assert lin.camber_change_deg[0] == pytest.approx((cp - cm) / 2, rel=0.01)
    np.testing.assert_allclose(lin.displacement_mm[0, :2], (up - um) / 2, rtol=0.01, atol=1e-6)


def test_play_sensitivity_matches_the_nonlinear_closure_with_a_longer_link():
    # ∂toe/∂l_i by central difference: solve the five length equations with link i ± h and the
    # wheel-centre height held (scipy.optimize.least_squares as the reference solver)
    corner = demo_corner("rear", "left")
    dtoe, dcam = play_sensitivity(corner)
    rel = np.array(corner.carrier - corner.wheel_centre)
    spin0, chassis = np.array(corner.spin_axis), np.array(corner.chassis)
    h = 1e-3

    def angles(lengths):
        def resid(x):
            q = corner.wheel_centre + x[:3] + Rotation.from_rotvec(x[3:]).apply(rel)
            return np.append(np.linalg.norm(q - chassis, axis=1) - lengths, x[2])
        x = least_squares(resid, np.zeros(6), xtol=1e-15, ftol=1e-15, gtol=1e-15).x
        return toe_camber_deg(Rotation.from_rotvec(x[3:]).apply(spin0))

    for i in range(5):
        dl = np.zeros(5)
        dl[i] = h
        (tp, cp), (tm, cm) = angles(corner.link_lengths + dl), angles(corner.link_lengths - dl)
        assert (tp - tm) / (2 * h) == pytest.approx(dtoe[i], rel=1e-4, abs=1e-7)
        assert (cp - cm) / (2 * h) == pytest.approx(dcam[i], rel=1e-4, abs=1e-7)


def test_play_band_is_the_sum_of_sensitivities_times_half_the_play():
    corner = with_links(demo_corner("rear", "left"), play=[0.2, 0.0, 0.4, 0.0, 0.3])
    dtoe, dcam = play_sensitivity(corner)
    tb, cb = play_bands(corner)
    assert tb == pytest.approx(np.sum(np.abs(dtoe) * corner.play / 2))
    assert cb == pytest.approx(np.sum(np.abs(dcam) * corner.play / 2))
    assert tb > 0 and cb > 0
    assert play_bands(demo_corner("rear", "left")) == (0.0, 0.0)


@pytest.mark.parametrize("side", ["left", "right"])
def test_new_demo_rear_goes_toward_toe_in_and_a_worn_toe_link_bush_flips_it(side):
    # stability rule (vehicle dynamics handbooks, DESIGN.md §4): outer rear toward toe-in = stable
    new = demo_corner("rear", side)
    assert stability_verdict(new).verdict == "stable"
    factor = stiffness_factor("debonding/separation")
    worn = with_links(new, stiffness={"toe link": new.stiffness[new.link_index("toe link")] * factor})
    verdict = stability_verdict(worn)
    assert verdict.verdict == "unstable" and verdict.direction == "toe-out"
    assert "(default)" in verdict.note


def test_enough_joint_play_makes_the_verdict_uncertain():
    new = demo_corner("rear", "left")
    v = stability_verdict(new)
    i = new.link_index("toe link")
    dtoe, _ = play_sensitivity(new)
    play_needed = 2 * abs(v.toe_change_deg) / abs(dtoe[i])
    loose = with_links(new, play={"toe link": 1.1 * play_needed})
    tight = with_links(new, play={"toe link": 0.9 * play_needed})
    assert stability_verdict(loose).verdict == "uncertain"
    assert stability_verdict(tight).verdict == "stable"


def test_bad_forces_are_refused():
    corner = demo_corner("rear", "left")
    with pytest.raises(ValueError, match="^force_N:"):
        load_response(corner, [1.0, 2.0])
    with pytest.raises(ValueError, match="^force_N:"):
        load_response(corner, [1.0, np.inf, 0.0])
    with pytest.raises(ValueError, match="^lateral_force_N:"):
        stability_verdict(corner, -5.0)


def test_the_batched_stiffness_sweep_matches_one_corner_per_stiffness():
    # invariant against the project's own unbatched path (load_response on a modified corner)
    from analytics.core.compliance import toe_change_for_link_stiffness
    from analytics.core.corner_file import with_links
    from analytics.core.demo_corners import demo_corner

    corner = demo_corner("rear", "left")
    force = np.array([120.0, -2900.0, 350.0])
    ks = np.geomspace(50.0, 20_000.0, 7)
    batched = toe_change_for_link_stiffness(corner, force, "toe link", ks)
    one_by_one = [float(load_response(with_links(corner, stiffness={"toe link": float(k)}),
                                      force).toe_change_deg[0]) for k in ks]
    np.testing.assert_allclose(batched, one_by_one, rtol=1e-10, atol=1e-12)


def test_many_states_at_once_give_each_state_s_own_response():
    # the batched path is the same model: each worn state (and a corner of another geometry, the
    # statics-by-hand pair above) against load_response / stability_verdict of that state alone
    from analytics.core.compliance import load_response_many, stability_verdicts

    new = demo_corner("rear", "left")
    states = [new, with_links(new, stiffness={"toe link": 900.0}, play=[0.2, 0, 0, 0, 0.4]),
              with_links(new, stiffness=[3000.0, 2500.0, 800.0, 4000.0, 350.0]),
              lateral_pair_corner(1500.0)]
    forces = np.array([[0.0, -3500.0, 0.0], [-2000.0, 0.0, 0.0], [-800.0, -2500.0, 0.0]])
    many = load_response_many(states, forces)
    for k, c in enumerate(states):
        one = load_response(c, forces)
        np.testing.assert_allclose(many.toe_change_deg[k], one.toe_change_deg, rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(many.camber_change_deg[k], one.camber_change_deg, rtol=1e-12,
                                   atol=1e-15)
        assert many.toe_band_deg[k] == pytest.approx(one.toe_band_deg, rel=1e-12)
    mixed = [demo_corner("rear", "right"), *states]
    verdicts = stability_verdicts(mixed, 3000.0)
    assert verdicts == [stability_verdict(c, 3000.0) for c in mixed]
