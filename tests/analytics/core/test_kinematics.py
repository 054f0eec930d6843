"""Kinematic sweep (DESIGN.md §4): closure, mobility, sign conventions, unreachable travel."""
import numpy as np
import pytest
from scipy.optimize import brentq, least_squares
from scipy.spatial.transform import Rotation

from analytics.core.corner_file import mirror_corner
from analytics.core.demo_corners import demo_corner
from analytics.core.kinematics import KinematicsError, sweep
from analytics.core.wheel_angles import spin_axis_from_angles, toe_camber_deg

from .corner_fixtures import FOUR_BAR, wishbone_four_bar_corner, yz_to_planar

TRAVEL = np.linspace(-80.0, 80.0, 33)


def freudenstein_open(theta2_deg, a, b, c, d):
    """θ4 and θ3 (deg) of the open branch from Freudenstein's equation
    K1 cos θ4 − K2 cos θ2 + K3 = cos(θ2 − θ4) and its coupler companion (Freudenstein 1955;
    closed form as in Norton, Design of Machinery, ch. 4)."""
    t2 = np.radians(theta2_deg)
    k1, k2, k3 = d / a, d / c, (a**2 - b**2 + c**2 + d**2) / (2 * a * c)
    k4, k5 = d / b, (c**2 - d**2 - a**2 - b**2) / (2 * a * b)
    A = np.cos(t2) - k1 - k2 * np.cos(t2) + k3
    B = -2 * np.sin(t2)
    C = k1 - (k2 + 1) * np.cos(t2) + k3
    D = np.cos(t2) - k1 + k4 * np.cos(t2) + k5
    E = -2 * np.sin(t2)
    F = k1 + (k4 - 1) * np.cos(t2) + k5
    t4 = 2 * np.arctan2(-B - np.sqrt(B**2 - 4 * A * C), 2 * A)
    t3 = 2 * np.arctan2(-E - np.sqrt(E**2 - 4 * D * F), 2 * D)
    return np.degrees(t4) % 360, np.degrees(t3) % 360


def four_bar_angles(result):
    """θ2, θ3, θ4 (deg) measured from the solved ball joints in the four-bar plane."""
    A = yz_to_planar(result.carrier_points[:, 0, 1:])
    B = yz_to_planar(result.carrier_points[:, 2, 1:])
    d = FOUR_BAR["d"]
    t2 = np.degrees(np.arctan2(A[:, 1], A[:, 0]))
    t4 = np.degrees(np.arctan2(B[:, 1], B[:, 0] - d))
    t3 = np.degrees(np.arctan2(B[:, 1] - A[:, 1], B[:, 0] - A[:, 0]))
    return t2, t3, t4


def test_freudenstein_check_value_of_the_issue():
    # Freudenstein's equation, check value a=40, b=120, c=80, d=100, θ2=60° (issue 3)
    t4, t3 = freudenstein_open(60.0, **FOUR_BAR)
    assert t4 == pytest.approx(64.943, abs=1e-3)
    assert t3 == pytest.approx(18.376, abs=1e-3)


def test_wishbone_with_pivot_axes_along_x_moves_as_freudensteins_four_bar():
    corner = wishbone_four_bar_corner(75.0)
    result = sweep(corner, np.linspace(-30.0, 15.0, 46))
    t2, t3, t4 = four_bar_angles(result)
    # the ball joints stay in the four-bar plane x = 0
    assert np.max(np.abs(result.carrier_points[:, [0, 2], 0])) < 1e-9
    ref4, ref3 = freudenstein_open(t2, **FOUR_BAR)
    np.testing.assert_allclose(t4, ref4, atol=1e-7)  # Freudenstein's equation
    np.testing.assert_allclose(t3, ref3, atol=1e-7)


def test_solver_reaches_the_freudenstein_check_pose():
    # Freudenstein's equation: θ2 = 60° → θ4 = 64.943°, θ3 = 18.376° (open branch)
    corner = wishbone_four_bar_corner(75.0)

    def crank(s):
        return four_bar_angles(sweep(corner, [s]))[0][0] - 60.0

    s60 = brentq(crank, 0.0, 15.0, xtol=1e-12)  # the mechanism folds near +18 mm
    _, t3, t4 = four_bar_angles(sweep(corner, [s60]))
    assert t4[0] == pytest.approx(64.943, abs=1e-3)
    assert t3[0] == pytest.approx(18.376, abs=1e-3)


@pytest.mark.parametrize("axle", ["front", "rear"])
def test_link_lengths_are_held_to_1e_9_mm_across_the_sweep(axle):
    corner = demo_corner(axle, "left")
    result = sweep(corner, TRAVEL)
    lengths = np.linalg.norm(result.carrier_points - corner.chassis, axis=2)
    assert np.max(np.abs(lengths - corner.link_lengths)) <= 1e-9
    np.testing.assert_allclose(result.wheel_centre[:, 2] - corner.wheel_centre[2], TRAVEL, atol=1e-9)


@pytest.mark.parametrize("axle", ["front", "rear"])
def test_link_rows_have_rank_five_at_every_pose(axle):
    # Grübler–Kutzbach: 7 bodies, 10 ball joints: 6·6 − 10·3 = 6, less 5 idle link spins → 1 dof,
    # so the five link rows of the Jacobian must be independent (rank 5)
    corner = demo_corner(axle, "left")
    result = sweep(corner, TRAVEL)
    for q, c in zip(result.carrier_points, result.wheel_centre, strict=True):
        e = (q - corner.chassis) / np.linalg.norm(q - corner.chassis, axis=1, keepdims=True)
        rows = np.hstack([e, np.cross(q - c, e) / 300.0])
        sv = np.linalg.svd(rows, compute_uv=False)
        assert sv[-1] > 1e-3 * sv[0]


def test_poses_agree_with_scipy_least_squares():
    # scipy.optimize.least_squares as the reference solver, started at the design pose
    corner = demo_corner("rear", "left")
    travel = np.array([-40.0, -5.0, 10.0, 35.0])
    result = sweep(corner, travel)
    rel = np.array(corner.carrier - corner.wheel_centre)
    spin0 = np.array(corner.spin_axis)
    for s, spin in zip(travel, result.spin_axis, strict=True):
        def resid(x, s=s):
            q = corner.wheel_centre + x[:3] + Rotation.from_rotvec(x[3:]).apply(rel)
            return np.append(np.linalg.norm(q - corner.chassis, axis=1) - corner.link_lengths,
                             x[2] - s)
        x = least_squares(resid, np.zeros(6), xtol=1e-15, ftol=1e-15, gtol=1e-15).x
        ref = Rotation.from_rotvec(x[3:]).apply(spin0)
        np.testing.assert_allclose(spin, ref, atol=1e-9)


def test_sign_conventions_of_toe_and_camber_on_both_sides():
    # ISO 8855 / DESIGN.md §3: toe-in = front of the wheel toward the centreline; camber positive
    # = top leans outboard. Build the outboard spin axis from the wheel's heading and up direction.
    eps, gam = np.radians(0.4), np.radians(1.5)
    for side, out in (("left", 1.0), ("right", -1.0)):
        heading = np.array([np.cos(eps), -out * np.sin(eps), 0.0])  # front turned inboard
        spin = np.cross(heading, [0.0, 0.0, 1.0])
        spin *= np.sign(spin[1]) * out
        toe, camber = toe_camber_deg(spin)
        assert toe == pytest.approx(0.4, abs=1e-9) and camber == pytest.approx(0.0, abs=1e-9)
        up = np.array([0.0, out * np.sin(gam), np.cos(gam)])  # top leaning outboard
        spin = np.cross([1.0, 0.0, 0.0], up)
        spin *= np.sign(spin[1]) * out
        toe, camber = toe_camber_deg(spin)
        assert toe == pytest.approx(0.0, abs=1e-9) and camber == pytest.approx(1.5, abs=1e-9)
        toe, camber = toe_camber_deg(spin_axis_from_angles(-0.3, -1.2, side))
        assert (toe, camber) == (pytest.approx(-0.3, abs=1e-12), pytest.approx(-1.2, abs=1e-12))


def test_mirrored_corner_sweeps_to_the_same_toe_and_camber():
    left = demo_corner("front", "left")
    a, b = sweep(left, TRAVEL), sweep(mirror_corner(left), TRAVEL)
    np.testing.assert_allclose(b.toe_deg, a.toe_deg, atol=1e-9)
    np.testing.assert_allclose(b.camber_deg, a.camber_deg, atol=1e-9)


def test_sweep_starts_at_the_static_angles_of_the_file():
    corner = demo_corner("rear", "left")
    result = sweep(corner, [0.0])
    toe, camber = toe_camber_deg(corner.spin_axis)
    assert result.toe_deg[0] == pytest.approx(toe, abs=1e-12)
    assert result.camber_deg[0] == pytest.approx(camber, abs=1e-12)


@pytest.mark.parametrize("axle", ["front", "rear"])
def test_bump_steer_and_camber_gain_match_a_central_difference_of_the_sweep(axle):
    corner = demo_corner(axle, "left")
    h = 0.01
    r = sweep(corner, [-h, h])
    assert r.bump_steer_deg_per_10mm == pytest.approx((r.toe_deg[1] - r.toe_deg[0]) / (2 * h) * 10,
                                                      abs=1e-6)
    assert r.camber_gain_deg_per_10mm == pytest.approx(
        (r.camber_deg[1] - r.camber_deg[0]) / (2 * h) * 10, abs=1e-6)


def test_rows_keep_the_requested_order():
    corner = demo_corner("rear", "left")
    travel = np.array([30.0, -10.0, 0.0, 5.0])
    rows = sweep(corner, travel).rows()
    assert [r["travel_mm"] for r in rows] == travel.tolist()


def test_travel_beyond_the_mechanism_is_refused_naming_the_travel():
    corner = wishbone_four_bar_corner(75.0)
    with pytest.raises(KinematicsError, match=r"^travel -?\d+(\.\d+)? mm: cannot be reached") as info:
        sweep(corner, np.linspace(-200.0, 200.0, 81))
    assert "over centre" in info.value.reason or "no convergence" in info.value.reason


def test_non_strict_sweep_marks_unreached_positions_and_keeps_the_rest_exact():
    corner = wishbone_four_bar_corner(75.0)
    travel = np.linspace(-200.0, 200.0, 81)
    result = sweep(corner, travel, strict=False)
    assert 0 < result.ok.sum() < travel.size
    assert set(result.problems) == set(np.flatnonzero(~result.ok))
    assert np.all(np.isnan(result.toe_deg[~result.ok]))
    assert np.max(result.length_error_mm[result.ok]) <= 1e-9
    # reachable positions form one interval around design
    reached = travel[result.ok]
    assert np.all(np.diff(np.flatnonzero(result.ok)) == 1) and reached.min() <= 0 <= reached.max()


@pytest.mark.parametrize("bad", [[], [np.nan], [[1.0, 2.0]], [5000.0]])
def test_bad_travel_is_refused(bad):
    with pytest.raises(ValueError, match="^travel_mm:"):
        sweep(demo_corner("rear", "left"), bad)


def test_rotating_a_vector_matches_scipy_rotations_for_large_and_tiny_angles():
    # reference library: scipy.spatial.transform.Rotation.from_rotvec (Rodrigues' formula)
    from analytics.core.wheel_angles import rotate_vectors, rotation_matrices

    rng = np.random.default_rng(11)
    w = rng.normal(size=(400, 3)) * np.logspace(-12, 0.5, 400)[:, None]  # 1e-12 … 3 rad
    v = np.array([0.01, 0.9998, -0.015])
    expected = Rotation.from_rotvec(w).apply(v)
    np.testing.assert_allclose(rotate_vectors(w, v), expected, rtol=0, atol=1e-14)
    np.testing.assert_allclose(rotate_vectors(w, v),
                               np.einsum("mij,j->mi", rotation_matrices(w), v), rtol=0, atol=1e-14)
