"""Corners built for the tests (not demo data): a planar four-bar wishbone and a planar
lateral-link pair embedded in a corner whose other links are very stiff."""
from __future__ import annotations

import numpy as np

from analytics.core.corner_file import Corner, corner_from_dict

# Four-bar of the Freudenstein check: crank a, coupler b, output c, ground d (mm).
FOUR_BAR = {"a": 40.0, "b": 120.0, "c": 80.0, "d": 100.0}
O2_YZ = np.array([400.0, 200.0])  # lower inner pivot axis (y, z); ground link runs +z to O4


def planar_to_yz(xy: np.ndarray) -> np.ndarray:
    """Four-bar plane (X along the ground link O2→O4, Y outboard) → vehicle (y, z)."""
    xy = np.asarray(xy, dtype=float)
    return np.stack([O2_YZ[0] + xy[..., 1], O2_YZ[1] + xy[..., 0]], axis=-1)


def yz_to_planar(yz: np.ndarray) -> np.ndarray:
    yz = np.asarray(yz, dtype=float)
    return np.stack([yz[..., 1] - O2_YZ[1], yz[..., 0] - O2_YZ[0]], axis=-1)


def circle_intersection_upper(p0, r0, p1, r1) -> np.ndarray:
    """Intersection of two circles (plain geometry), the one on the left of p0→p1."""
    p0, p1 = np.asarray(p0, float), np.asarray(p1, float)
    d = np.linalg.norm(p1 - p0)
    a = (r0**2 - r1**2 + d**2) / (2 * d)
    h = np.sqrt(r0**2 - a**2)
    m = p0 + a * (p1 - p0) / d
    perp = np.array([-(p1 - p0)[1], (p1 - p0)[0]]) / d
    return m + h * perp


def wishbone_four_bar_corner(theta2_deg: float = 75.0) -> Corner:
    """A double wishbone whose pivot axes all run along x: it moves as the four-bar in y–z.

    Design pose at crank angle ``theta2_deg``; the coupler joint B is placed by intersecting
    circles (not by Freudenstein's equation).
    """
    a, b, c, d = (FOUR_BAR[k] for k in "abcd")
    th = np.radians(theta2_deg)
    A = np.array([a * np.cos(th), a * np.sin(th)])
    B = circle_intersection_upper(A, b, np.array([d, 0.0]), c)
    O4 = np.array([d, 0.0])
    o2, o4 = planar_to_yz(np.zeros(2)), planar_to_yz(O4)
    ay, az = planar_to_yz(A)
    by, bz = planar_to_yz(B)
    centre = [0.0, ay + 90.0, az + 40.0]
    links = [
        {"name": "lower front", "chassis": [150.0, o2[0], o2[1]], "carrier": [0.0, ay, az]},
        {"name": "lower rear", "chassis": [-150.0, o2[0], o2[1]], "carrier": [0.0, ay, az]},
        {"name": "upper front", "chassis": [150.0, o4[0], o4[1]], "carrier": [0.0, by, bz]},
        {"name": "upper rear", "chassis": [-150.0, o4[0], o4[1]], "carrier": [0.0, by, bz]},
        {"name": "track rod", "chassis": [-120.0, o2[0] - 20.0, az + 30.0],
         "carrier": [-120.0, ay + 40.0, az + 30.0]},
    ]
    for link in links:
        link.update(stiffness_N_per_mm=5000.0, play_mm=0.0)
    return corner_from_dict({
        "name": "test four-bar wishbone", "side": "left", "wheel_centre": centre,
        "spin_axis": [0.0, 1.0, 0.0], "contact_patch": [0.0, centre[1], centre[2] - 300.0],
        "links": links})


def lateral_pair_corner(rear_stiffness: float = 3000.0) -> Corner:
    """Two links along y at x = ±100 mm (3000 N/mm front), three very stiff links elsewhere.

    Contact patch 30 mm behind the centre between the pair (and 300 mm below the wheel centre);
    the stiff links take only Fx, Mx and My, so the pair alone reacts Fy and Mz.
    """
    stiff = 1e7
    links = [
        {"name": "front lateral", "chassis": [100.0, 400.0, 300.0], "carrier": [100.0, 700.0, 300.0],
         "stiffness_N_per_mm": 3000.0},
        {"name": "rear lateral", "chassis": [-100.0, 400.0, 300.0], "carrier": [-100.0, 700.0, 300.0],
         "stiffness_N_per_mm": rear_stiffness},
        {"name": "fore-aft", "chassis": [-300.0, 750.0, 300.0], "carrier": [0.0, 750.0, 300.0],
         "stiffness_N_per_mm": stiff},
        {"name": "vertical inner", "chassis": [0.0, 650.0, 0.0], "carrier": [0.0, 650.0, 300.0],
         "stiffness_N_per_mm": stiff},
        {"name": "vertical front", "chassis": [150.0, 750.0, 0.0], "carrier": [150.0, 750.0, 300.0],
         "stiffness_N_per_mm": stiff},
    ]
    for link in links:
        link["play_mm"] = 0.0
    return corner_from_dict({
        "name": "test lateral pair", "side": "left", "wheel_centre": [0.0, 750.0, 300.0],
        "spin_axis": [0.0, 1.0, 0.0], "contact_patch": [-30.0, 750.0, 0.0], "links": links})
