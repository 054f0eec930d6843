"""Benchmark of the corner engine (a script, not a test): ``python bench/bench_corner.py``.

1. A 241-position sweep (−120…+120 mm, 1 mm) of the demo five-link rear corner with the batched
   Newton solver, against a per-point ``scipy.optimize.least_squares`` baseline in the same run
   (each point started from the previous solution). Targets: ≥ 20× faster, worst link-length
   residual ≤ 1e-9 mm.
2. All four corners × four load cases of one vehicle (compliance, play bands), against a baseline
   that solves each corner-and-case pair one at a time. Target: ≤ 5 ms.
"""
from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
os.environ.setdefault("DEBUG", "1")

from scipy.optimize import least_squares  # noqa: E402
from scipy.spatial.transform import Rotation  # noqa: E402

from analytics.core.compliance import load_response  # noqa: E402
from analytics.core.demo_corners import demo_corner  # noqa: E402
from analytics.core.kinematics import sweep  # noqa: E402
from analytics.core.load_cases import CORNERS, Platform, vehicle_load_cases  # noqa: E402


def best_of(fn, repeat):
    times = []
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def baseline_sweep(corner, travel):
    rel = np.array(corner.carrier - corner.wheel_centre)
    chassis, lengths = np.array(corner.chassis), corner.link_lengths
    order = np.argsort(np.abs(travel), kind="stable")
    poses = np.zeros((travel.size, 6))
    last = {1.0: np.zeros(6), -1.0: np.zeros(6)}
    for i in order:
        s = travel[i]
        side = 1.0 if s >= 0 else -1.0

        def resid(x, s=s):
            q = corner.wheel_centre + x[:3] + Rotation.from_rotvec(x[3:]).apply(rel)
            return np.append(np.linalg.norm(q - chassis, axis=1) - lengths, x[2] - s)

        x = least_squares(resid, last[side], xtol=1e-15, ftol=1e-15, gtol=1e-15).x
        poses[i] = last[side] = x
    q = (corner.wheel_centre + poses[:, None, :3]
         + np.stack([Rotation.from_rotvec(p[3:]).apply(rel) for p in poses]))
    return np.max(np.abs(np.linalg.norm(q - chassis, axis=2) - lengths))


def main() -> None:
    corner = demo_corner("rear", "left")
    travel = np.linspace(-120.0, 120.0, 241)
    sweep(corner, travel)  # warm up
    t_new, res = best_of(lambda: sweep(corner, travel), 20)
    t_base, base_resid = best_of(lambda: baseline_sweep(corner, travel), 3)
    resid = float(np.max(res.length_error_mm))

    platform = Platform(front_axle_load_N=8340.0, rear_axle_load_N=6380.0, track_front_mm=1560.0,
                        track_rear_mm=1550.0, wheelbase_mm=2750.0, cg_height_mm=550.0,
                        tyre_radius_mm=315.0, brake_balance_front=0.7, driven_axle="front")
    corners = {"FL": demo_corner("front", "left"), "FR": demo_corner("front", "right"),
               "RL": demo_corner("rear", "left"), "RR": demo_corner("rear", "right")}

    def vehicle():
        cases = vehicle_load_cases(platform, outer_side="right")
        return {pos: load_response(corners[pos], np.array([c.delta_force(pos) for c in cases]))
                for pos in CORNERS}

    def vehicle_one_at_a_time():
        cases = vehicle_load_cases(platform, outer_side="right")
        return [load_response(corners[pos], c.delta_force(pos)) for pos in CORNERS for c in cases]

    vehicle()
    t_veh, _ = best_of(vehicle, 200)
    t_veh_base, _ = best_of(vehicle_one_at_a_time, 200)

    print(f"{'case':<44} {'time ms':>10} {'ratio':>8} {'worst residual mm':>19}")
    print(f"{'sweep 241 positions, batched Newton':<44} {t_new * 1e3:>10.2f} {'':>8} {resid:>19.2e}")
    print(f"{'sweep 241 positions, least_squares per point':<44} {t_base * 1e3:>10.2f} "
          f"{t_base / t_new:>7.1f}x {base_resid:>19.2e}")
    print(f"{'4 corners x 4 load cases, stacked':<44} {t_veh * 1e3:>10.3f} {'':>8} {'':>19}")
    print(f"{'4 corners x 4 load cases, one at a time':<44} {t_veh_base * 1e3:>10.3f} "
          f"{t_veh_base / t_veh:>7.1f}x {'':>19}")
    ok = t_base / t_new >= 20 and resid <= 1e-9 and t_veh <= 5e-3
    print(f"targets (>= 20x, <= 1e-9 mm, <= 5 ms): {'met' if ok else 'NOT met'}")


if __name__ == "__main__":
    main()
