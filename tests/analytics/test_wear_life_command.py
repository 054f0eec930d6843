"""``manage.py wear-life`` (DESIGN.md §6) run as a subprocess."""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

ROOT = Path(__file__).resolve().parents[2]


def run(*args):
    env = {**os.environ, "DEBUG": "1"}
    return subprocess.run(
        [sys.executable, "manage.py", "wear-life", *args],
        cwd=ROOT, env=env, capture_output=True, text=True, timeout=120,
    )


@pytest.fixture
def life_csv(tmp_path):
    rng = np.random.default_rng(42)
    life = stats.weibull_min.rvs(2.2, scale=80000.0, size=40, random_state=rng)
    removed = rng.uniform(30000.0, 150000.0, 40)
    t, failed = np.minimum(life, removed).round(0), (life <= removed).astype(int)
    path = tmp_path / "life.csv"
    rows = "".join(f"{a:.0f},{b}\n" for a, b in zip(t, failed, strict=True))
    path.write_text("distance_km,failed\n" + rows)
    return path, t, failed


def test_json_output_matches_the_reference_fit(life_csv):
    path, t, failed = life_csv
    res = run("--data", str(path), "--costs", "200,1500", "--json")
    assert res.returncode == 0, res.stderr
    out = json.loads(res.stdout)
    # reference: scipy.stats.weibull_min.fit on scipy.stats.CensoredData, floc=0
    c, _, scale = stats.weibull_min.fit(
        stats.CensoredData(uncensored=t[failed == 1], right=t[failed == 0]), floc=0)
    assert out["shape"] == pytest.approx(c, rel=1e-5)
    assert out["scale_km"] == pytest.approx(scale, rel=1e-5)
    assert {"log_likelihood", "interval_km", "cost_rate_per_km"} <= out.keys()
    assert 0 < out["interval_km"] < out["mean_life_km"]
    assert out["cost_rate_per_km"] < out["run_to_failure_cost_rate_per_km"]


def test_without_costs_there_is_no_interval(life_csv):
    res = run("--data", str(life_csv[0]), "--json")
    out = json.loads(res.stdout)
    assert res.returncode == 0 and "interval_km" not in out and "cost_rate_per_km" not in out


def test_the_table_is_readable(life_csv):
    res = run("--data", str(life_csv[0]), "--costs", "200,1500")
    assert res.returncode == 0
    assert "shape" in res.stdout and "replace at" in res.stdout and "km" in res.stdout


def write(tmp_path, text):
    p = tmp_path / "bad.csv"
    p.write_text(text)
    return str(p)


@pytest.mark.parametrize(
    ("make_args", "needle"),
    [
        (lambda tp: ["--data", str(tp / "missing.csv")], "not found"),
        (lambda tp: ["--data", write(tp, "km,failed\n1,1\n")], "bad header"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n100,1\nabc,0\n")],
         "line 3: distance_km 'abc' is not a number"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n100,1\n-5,0\n")], "negative"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n100,2\n")], "must be 0 or 1"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n100,1\n200,1\n300,0\n")],
         "not enough data"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n")], "no data rows"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n1,1\n"), "--costs", "1"], "--costs"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n1,1\n"), "--costs", "a,b"],
         "--costs"),
        (lambda tp: ["--data", write(tp, "distance_km,failed\n1,1\n"), "--costs", "-1,5"],
         "--costs"),
        (lambda tp: [], "--data"),
    ],
)
def test_bad_input_exits_2_with_one_line_and_no_traceback(tmp_path, make_args, needle):
    res = run(*make_args(tmp_path))
    assert res.returncode == 2
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1, res.stderr
    assert needle in lines[0] and "Traceback" not in res.stderr
    assert res.stdout == ""
