"""Settings read the environment strictly; a malformed value stops start-up with one line."""
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def run_check(**env):
    base = {k: v for k, v in os.environ.items()
            if k not in {"DATABASE_URL", "REDIS_URL", "SECRET_KEY", "DEBUG", "TIME_ZONE"}}
    base.update(env)
    return subprocess.run([sys.executable, "manage.py", "check"], cwd=ROOT, env=base,
                          capture_output=True, text=True, timeout=60)


@pytest.mark.parametrize("env, variable", [
    ({"DEBUG": "maybe"}, "DEBUG"),
    ({"DEBUG": "0"}, "SECRET_KEY"),
    ({"DEBUG": "1", "DATABASE_URL": "mysql://x/y"}, "DATABASE_URL"),
    ({"DEBUG": "1", "DATABASE_URL": "postgres://host:notaport/db"}, "DATABASE_URL"),
    ({"DEBUG": "1", "REDIS_URL": "http://localhost"}, "REDIS_URL"),
    ({"DEBUG": "1", "TIME_ZONE": "Mars/Olympus"}, "TIME_ZONE"),
    ({"DEBUG": "1", "ALLOWED_HOSTS": "a,,b"}, "ALLOWED_HOSTS"),
    ({"DEBUG": "1", "EMAIL_PORT": "smtp"}, "EMAIL_PORT"),
])
def test_a_malformed_variable_stops_start_up_with_one_line_naming_it(env, variable):
    result = run_check(**env)
    assert result.returncode == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert variable in lines[0]
    assert "Traceback" not in result.stderr


def test_the_embedded_default_starts_with_no_database_url_and_no_redis():
    result = run_check(DEBUG="1")
    assert result.returncode == 0, result.stderr
