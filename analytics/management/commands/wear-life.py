"""``manage.py wear-life``: fleet life of a part type from a CSV of service events.

Usage::

    python manage.py wear-life --data FILE.csv [--costs PREVENTIVE,FAILURE] [--json]

The CSV has the header ``distance_km,failed``; ``failed`` is 1 for a failure and 0 for a part
still in service or removed unfailed (right-censored). The output (DESIGN.md §6) is a right-
censored Weibull fit and, with ``--costs``, the age-replacement interval of Barlow & Proschan.
JSON keys: ``shape``, ``scale_km``, ``log_likelihood``, ``shape_ci_low``, ``shape_ci_high``,
``scale_km_ci_low``, ``scale_km_ci_high``, ``confidence``, ``failures``, ``censored``,
``mean_life_km`` and, with ``--costs``, ``interval_km`` (null when preventive replacement does
not pay), ``cost_rate_per_km`` (at the interval, or running to failure when it is null),
``run_to_failure_cost_rate_per_km`` and ``note``.

Bad input: exit status 2 and one line on stderr naming what is wrong.
"""

from __future__ import annotations

import csv
import json
import math
import sys
from pathlib import Path
from typing import Any, NoReturn

from django.core.management.base import BaseCommand, CommandError, CommandParser

from analytics.core.life import NotEnoughData, age_replacement, fit_weibull

EXPECTED_HEADER = ["distance_km", "failed"]


def _fail(message: str) -> NoReturn:
    raise CommandError(message, returncode=2)


def read_life_csv(path: Path) -> tuple[list[float], list[int]]:
    """Rows of ``distance_km,failed``; every problem raises CommandError naming the line."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        _fail(f"data file not found: {path}")
    except IsADirectoryError:
        _fail(f"data file is a directory: {path}")
    except UnicodeDecodeError:
        _fail(f"data file is not UTF-8 text: {path}")
    except OSError as exc:
        _fail(f"cannot read data file {path}: {exc.strerror}")
    rows = list(csv.reader(text.splitlines()))
    if not rows:
        _fail(f"data file is empty: {path}")
    header = [c.strip() for c in rows[0]]
    if header != EXPECTED_HEADER:
        _fail(f"bad header {','.join(header)!r}: expected 'distance_km,failed'")
    distances: list[float] = []
    failed: list[int] = []
    for line_no, row in enumerate(rows[1:], start=2):
        if not row or all(not c.strip() for c in row):
            continue  # blank line
        if len(row) != 2:
            _fail(f"line {line_no}: expected 2 columns, got {len(row)}")
        raw_d, raw_f = (c.strip() for c in row)
        try:
            d = float(raw_d)
        except ValueError:
            _fail(f"line {line_no}: distance_km {raw_d!r} is not a number")
        if not math.isfinite(d):
            _fail(f"line {line_no}: distance_km {raw_d!r} is not finite")
        if d < 0:
            _fail(f"line {line_no}: distance_km {raw_d} is negative")
        if d == 0:
            _fail(f"line {line_no}: distance_km is 0; a life must be positive")
        if raw_f not in ("0", "1"):
            _fail(f"line {line_no}: failed {raw_f!r} must be 0 or 1")
        distances.append(d)
        failed.append(int(raw_f))
    if not distances:
        _fail(f"data file has no data rows: {path}")
    return distances, failed


def parse_costs(raw: str) -> tuple[float, float]:
    """``PREVENTIVE,FAILURE`` as two finite positive numbers."""
    parts = [p.strip() for p in raw.split(",")]
    if len(parts) != 2:
        _fail(f"--costs {raw!r}: expected PREVENTIVE,FAILURE")
    try:
        cp, cf = float(parts[0]), float(parts[1])
    except ValueError:
        _fail(f"--costs {raw!r}: both costs must be numbers")
    if not (math.isfinite(cp) and math.isfinite(cf) and cp > 0 and cf > 0):
        _fail(f"--costs {raw!r}: both costs must be finite and > 0")
    return cp, cf


class Command(BaseCommand):
    help = "Weibull fleet life (right-censored) and age-replacement interval from a CSV."

    def create_parser(self, prog_name: str, subcommand: str, **kwargs: Any) -> CommandParser:
        parser = super().create_parser(prog_name, subcommand, **kwargs)

        def one_line_error(message: str) -> NoReturn:
            sys.stderr.write(f"wear-life: {message}\n")
            sys.exit(2)

        parser.error = one_line_error  # type: ignore[method-assign]
        return parser

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("--data", required=True, type=Path, help="CSV: distance_km,failed")
        parser.add_argument(
            "--costs", help="PREVENTIVE,FAILURE cost of one planned / one failure replacement"
        )
        parser.add_argument("--json", action="store_true", help="print JSON")

    def handle(self, *args: Any, **options: Any) -> None:
        costs = parse_costs(options["costs"]) if options["costs"] is not None else None
        distances, failed = read_life_csv(options["data"])
        try:
            fit = fit_weibull(distances, failed)
        except NotEnoughData as exc:
            _fail(str(exc))
        except ValueError as exc:
            _fail(f"cannot fit: {exc}")
        out: dict[str, Any] = {
            "shape": fit.shape,
            "scale_km": fit.scale,
            "log_likelihood": fit.log_likelihood,
            "shape_ci_low": fit.shape_ci[0],
            "shape_ci_high": fit.shape_ci[1],
            "scale_km_ci_low": fit.scale_ci[0],
            "scale_km_ci_high": fit.scale_ci[1],
            "confidence": fit.confidence,
            "failures": fit.failures,
            "censored": fit.censored,
            "mean_life_km": fit.mean_life,
        }
        if costs is not None:
            plan = age_replacement(
                shape=fit.shape,
                scale=fit.scale,
                preventive_cost=costs[0],
                failure_cost=costs[1],
            )
            out.update(
                interval_km=plan.interval,
                cost_rate_per_km=plan.cost_rate,
                run_to_failure_cost_rate_per_km=plan.run_to_failure_cost_rate,
                note=plan.reason,
            )
        if options["json"]:
            self.stdout.write(json.dumps(out))
            return
        self.stdout.write(self._table(out))

    @staticmethod
    def _table(out: dict[str, Any]) -> str:
        pct = round(100 * out["confidence"])
        lines = [
            f"Weibull life, right-censored ({out['failures']} failed, {out['censored']} censored)",
            f"  shape            {out['shape']:.4g}   ({pct}% CI {out['shape_ci_low']:.4g} – "
            f"{out['shape_ci_high']:.4g})",
            f"  scale            {out['scale_km']:,.0f} km   ({pct}% CI "
            f"{out['scale_km_ci_low']:,.0f} – {out['scale_km_ci_high']:,.0f} km)",
            f"  mean life        {out['mean_life_km']:,.0f} km",
            f"  log-likelihood   {out['log_likelihood']:.4f}",
        ]
        if "interval_km" in out:
            interval = out["interval_km"]
            lines.append(
                "  replace at       "
                + ("run to failure" if interval is None else f"{interval:,.0f} km")
            )
            lines.append(f"  cost per km      {out['cost_rate_per_km']:.6g}")
            lines.append(f"  run to failure   {out['run_to_failure_cost_rate_per_km']:.6g} per km")
            lines.append(f"  note             {out['note']}")
        return "\n".join(lines)
