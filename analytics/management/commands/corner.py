"""``manage.py corner``: kinematic sweep and compliance under a load for one corner file.

    python manage.py corner sweep --geometry FILE --travel FROM:TO:STEP [--json]
    python manage.py corner load  --geometry FILE --force FX,FY,FZ [--json]

Travel in mm (positive = bump); force in N at the contact patch, vehicle axes ISO 8855
(x forward, y left, z up). ``--json`` prints a list of rows ``{travel_mm, toe_deg, camber_deg}``
(sweep) or one object ``{toe_change_deg, camber_change_deg, toe_band_deg, camber_band_deg,
member_forces_N}`` (load); without it a readable table. Bad input: exit status 2 and one line on
stderr naming what is wrong.
"""
from __future__ import annotations

import argparse
import json
import math
import sys

import numpy as np
from django.core.management.base import BaseCommand

from analytics.core.compliance import load_response
from analytics.core.corner_file import CornerFileError, load_corner
from analytics.core.kinematics import KinematicsError, sweep

MAX_TRAVEL_POINTS = 100_001
_VALUE_OPTIONS = ("--travel", "--force")


class _BadInput(Exception):
    pass


class _OneLineParser(argparse.ArgumentParser):
    """Argument errors as one line and exit status 2 (no usage block)."""

    def error(self, message: str):  # noqa: D401 - argparse hook
        raise _BadInput(message)


def parse_travel(spec: str) -> np.ndarray:
    """``"FROM:TO:STEP"`` (mm) → travel positions from FROM to TO inclusive, STEP > 0."""
    parts = spec.split(":")
    if len(parts) != 3:
        raise _BadInput(f"--travel: expected FROM:TO:STEP in mm, got {spec!r}")
    try:
        lo, hi, step = (float(p) for p in parts)
    except ValueError:
        raise _BadInput(f"--travel: expected three numbers FROM:TO:STEP, got {spec!r}") from None
    if not all(math.isfinite(v) for v in (lo, hi, step)):
        raise _BadInput("--travel: numbers must be finite")
    if step <= 0:
        raise _BadInput("--travel: STEP must be positive")
    if hi < lo:
        raise _BadInput("--travel: TO must not be below FROM")
    count = int(math.floor((hi - lo) / step + 1e-9)) + 1
    if count > MAX_TRAVEL_POINTS:
        raise _BadInput(f"--travel: more than {MAX_TRAVEL_POINTS} positions")
    return lo + step * np.arange(count)


def parse_force(spec: str) -> np.ndarray:
    """``"FX,FY,FZ"`` (N) → (3,)."""
    parts = spec.split(",")
    if len(parts) != 3:
        raise _BadInput(f"--force: expected FX,FY,FZ in N, got {spec!r}")
    try:
        f = np.array([float(p) for p in parts])
    except ValueError:
        raise _BadInput(f"--force: expected three numbers FX,FY,FZ, got {spec!r}") from None
    if not np.all(np.isfinite(f)):
        raise _BadInput("--force: numbers must be finite")
    return f


def _join_negative_values(argv: list[str]) -> list[str]:
    """Let ``--travel -50:50:5`` work: argparse would read ``-50:50:5`` as an option."""
    out: list[str] = []
    i = 0
    while i < len(argv):
        a = argv[i]
        nxt = argv[i + 1] if i + 1 < len(argv) else ""
        if a in _VALUE_OPTIONS and nxt.startswith("-") and (nxt[1:2].isdigit() or nxt[1:2] == "."):
            out.append(f"{a}={argv[i + 1]}")
            i += 2
            continue
        out.append(a)
        i += 1
    return out


class Command(BaseCommand):
    help = "Corner engine: kinematic sweep or compliance under a contact-patch force."

    def run_from_argv(self, argv):
        try:
            options = self._parse(argv[2:])
            self.handle(**options)
        except (_BadInput, CornerFileError, KinematicsError, ValueError) as exc:
            sys.stderr.write(f"corner: {str(exc).splitlines()[0] if str(exc) else type(exc).__name__}\n")
            sys.exit(2)

    def _parse(self, args: list[str]) -> dict:
        parser = _OneLineParser(prog="manage.py corner", add_help=True)
        sub = parser.add_subparsers(dest="action", required=True, parser_class=_OneLineParser)
        p_sweep = sub.add_parser("sweep", help="toe and camber over wheel travel")
        p_sweep.add_argument("--geometry", required=True, help="corner JSON file")
        p_sweep.add_argument("--travel", required=True, help="FROM:TO:STEP in mm (bump positive)")
        p_sweep.add_argument("--json", action="store_true")
        p_load = sub.add_parser("load", help="compliance under a contact-patch force")
        p_load.add_argument("--geometry", required=True, help="corner JSON file")
        p_load.add_argument("--force", required=True, help="FX,FY,FZ in N at the contact patch")
        p_load.add_argument("--json", action="store_true")
        ns = parser.parse_args(_join_negative_values(list(args)))
        return vars(ns)

    def add_arguments(self, parser):  # for call_command / --help through Django
        parser.add_argument("action", choices=["sweep", "load"])
        parser.add_argument("--geometry", required=True)
        parser.add_argument("--travel")
        parser.add_argument("--force")
        parser.add_argument("--json", action="store_true")

    def handle(self, *args, **options):
        corner = load_corner(options["geometry"])
        if options["action"] == "sweep":
            if not options.get("travel"):
                raise _BadInput("--travel: required for sweep")
            result = sweep(corner, parse_travel(options["travel"]))
            rows = result.rows()
            if options.get("json"):
                self.stdout.write(json.dumps(rows))
                return
            self.stdout.write(f"{corner.name}: toe (+ = toe-in) and camber (+ = top outboard)")
            self.stdout.write(f"{'travel mm':>10} {'toe deg':>10} {'camber deg':>11}")
            for r in rows:
                self.stdout.write(
                    f"{r['travel_mm']:>10.2f} {r['toe_deg']:>10.4f} {r['camber_deg']:>11.4f}")
            self.stdout.write(
                f"bump steer {result.bump_steer_deg_per_10mm:+.4f}°/10 mm, camber gain "
                f"{result.camber_gain_deg_per_10mm:+.4f}°/10 mm at design")
            return
        if not options.get("force"):
            raise _BadInput("--force: required for load")
        res = load_response(corner, parse_force(options["force"]))
        out = {
            "toe_change_deg": float(res.toe_change_deg[0]),
            "camber_change_deg": float(res.camber_change_deg[0]),
            "toe_band_deg": float(res.toe_band_deg),
            "camber_band_deg": float(res.camber_band_deg),
            "member_forces_N": res.member_forces(0),
        }
        if options.get("json"):
            self.stdout.write(json.dumps(out))
            return
        self.stdout.write(f"{corner.name}: force at the contact patch {options['force']} N")
        self.stdout.write(f"toe change    {out['toe_change_deg']:+.4f}° ± {out['toe_band_deg']:.4f}°"
                          " (+ = toe-in)")
        self.stdout.write(f"camber change {out['camber_change_deg']:+.4f}° ± "
                          f"{out['camber_band_deg']:.4f}° (+ = top outboard)")
        self.stdout.write(f"{'link':<24} {'force N (tension +)':>20}")
        for name, f in out["member_forces_N"].items():
            self.stdout.write(f"{name:<24} {f:>20.1f}")
