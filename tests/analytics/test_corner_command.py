"""`manage.py corner sweep|load` (DESIGN.md §6), run as a real subprocess."""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from analytics.core.compliance import load_response
from analytics.core.demo_corners import DEMO_CORNER_FILES, demo_corner
from analytics.core.kinematics import sweep

ROOT = Path(__file__).resolve().parents[2]
REAR = str(DEMO_CORNER_FILES["rear"])


def run(*args):
    env = {**os.environ, "DEBUG": "1"}
    return subprocess.run([sys.executable, str(ROOT / "manage.py"), "corner", *args], cwd=ROOT,
                          env=env, capture_output=True, text=True, timeout=120)


def test_sweep_prints_json_rows():
    out = run("sweep", "--geometry", REAR, "--travel", "-50:50:25", "--json")
    assert out.returncode == 0, out.stderr
    rows = json.loads(out.stdout)
    assert [r["travel_mm"] for r in rows] == [-50, -25, 0, 25, 50]
    ref = sweep(demo_corner("rear", "left"), [-50, -25, 0, 25, 50])
    assert [r["toe_deg"] for r in rows] == pytest.approx(ref.toe_deg.tolist(), abs=1e-12)
    assert set(rows[0]) == {"travel_mm", "toe_deg", "camber_deg"}


def test_load_prints_the_json_of_design_section_6():
    out = run("load", "--geometry", REAR, "--force", "-500,-3000,200", "--json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert set(data) == {"toe_change_deg", "camber_change_deg", "toe_band_deg", "camber_band_deg",
                         "member_forces_N"}
    ref = load_response(demo_corner("rear", "left"), [-500, -3000, 200])
    assert data["toe_change_deg"] == pytest.approx(ref.toe_change_deg[0])
    assert data["member_forces_N"] == pytest.approx(ref.member_forces(0))


def test_without_json_a_readable_table():
    out = run("sweep", "--geometry", REAR, "--travel", "0:10:5")
    assert out.returncode == 0 and "toe" in out.stdout and "bump steer" in out.stdout
    out = run("load", "--geometry", REAR, "--force", "0,-3000,0")
    assert out.returncode == 0 and "toe link" in out.stdout


@pytest.mark.parametrize("args,needle", [
    (("sweep", "--geometry", "/nonexistent/corner.json", "--travel", "0:10:5"), "file not found"),
    (("sweep", "--geometry", REAR, "--travel", "0:10"), "--travel"),
    (("sweep", "--geometry", REAR, "--travel", "0:10:-1"), "--travel"),
    (("sweep", "--geometry", REAR, "--travel", "-900:0:10"), "travel"),
    (("load", "--geometry", REAR, "--force", "1,2"), "--force"),
    (("load", "--geometry", REAR, "--force", "a,b,c"), "--force"),
    (("load", "--geometry", REAR), "--force"),
    (("spin", "--geometry", REAR), "invalid choice"),
])
def test_bad_input_exits_2_with_one_line(args, needle):
    out = run(*args)
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and needle in lines[0] and "Traceback" not in out.stderr


def test_bad_corner_files_exit_2_naming_the_field(tmp_path):
    bad_json = tmp_path / "bad.json"
    bad_json.write_text("{oops")
    raw = json.loads(Path(REAR).read_text())
    raw["links"][2]["carrier"] = raw["links"][2]["chassis"]
    invalid = tmp_path / "invalid.json"
    invalid.write_text(json.dumps(raw))
    for path, needle in ((bad_json, "not valid JSON"), (invalid, "links[2].carrier: coincident")):
        out = run("load", "--geometry", str(path), "--force", "0,1000,0", "--json")
        assert out.returncode == 2 and out.stdout == ""
        lines = out.stderr.strip().splitlines()
        assert len(lines) == 1 and needle in lines[0]
