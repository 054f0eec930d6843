"""Throwaway PostgreSQL, Redis, Celery workers and a web server on loopback, for fault tests.

Every process here is our own: a PostgreSQL cluster made with ``initdb`` in a temporary folder, a
``redis-server`` that keeps nothing on disk, workers and gunicorn started with the environment of
those two. Nothing touches the machine's shared PostgreSQL (5432) or Redis (6379). Ports are the
preferred ones when free, else the next free ones; every wait is bounded.
"""
from __future__ import annotations

import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
LOGS = ROOT / "var" / "faults"
PASSWORD = "faults-pass-123"


def free_port(preferred: int, tries: int = 50) -> int:
    for port in range(preferred, preferred + tries):
        with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
            try:
                s.bind(("127.0.0.1", port))
            except OSError:
                continue
            return port
    raise RuntimeError(f"no free loopback port in {preferred}..{preferred + tries - 1}")


def wait_for(predicate, timeout: float, interval: float = 0.1, what: str = "condition"):
    """Poll ``predicate`` until it returns a truthy value; raise after ``timeout`` seconds."""
    deadline = time.monotonic() + timeout
    while True:
        value = predicate()
        if value:
            return value
        if time.monotonic() > deadline:
            raise TimeoutError(f"{what} not reached within {timeout} s")
        time.sleep(interval)


def tail(path: Path, n: int = 40) -> str:
    try:
        return "\n".join(path.read_text(errors="replace").splitlines()[-n:])
    except OSError:
        return ""


def stop_process(proc: subprocess.Popen, timeout: float = 15) -> None:
    if proc.poll() is not None:
        return
    proc.terminate()
    try:
        proc.wait(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait(timeout=10)


# --------------------------------------------------------------------------- PostgreSQL


def _pg_bin() -> Path | None:
    base = Path("/usr/lib/postgresql")
    if not base.is_dir():
        return None
    versions = sorted((p for p in base.iterdir() if (p / "bin" / "initdb").exists()),
                      key=lambda p: int(p.name) if p.name.isdigit() else 0)
    return versions[-1] / "bin" if versions else None


class PgCluster:
    """A PostgreSQL cluster of our own on 127.0.0.1:<port>, removed on :meth:`destroy`."""

    def __init__(self, preferred_port: int = 5440):
        self.bin = _pg_bin()
        if self.bin is None:
            raise FileNotFoundError("PostgreSQL server binaries (/usr/lib/postgresql/*/bin)")
        self.port = free_port(preferred_port)
        self.dir = Path(tempfile.mkdtemp(prefix="fleetsvc-faults-pg-"))
        self.data = self.dir / "data"
        self.sock = self.dir / "sock"
        self.sock.mkdir()
        self.log = self.dir / "postgres.log"
        self._as_postgres = os.geteuid() == 0
        if self._as_postgres:
            shutil.chown(self.dir, "postgres")
            shutil.chown(self.sock, "postgres")
        self._run("initdb", "-D", str(self.data), "-U", "postgres", "--auth=trust",
                  "--no-sync", "-E", "UTF8", "--locale=C")
        self.start()

    def _run(self, tool: str, *args: str, timeout: float = 60) -> subprocess.CompletedProcess:
        cmd = [str(self.bin / tool), *args]
        if self._as_postgres:
            cmd = ["runuser", "-u", "postgres", "--", *cmd]
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, cwd=self.dir)
        if done.returncode != 0:
            raise RuntimeError(f"{tool} failed ({done.returncode}): {done.stderr.strip()}\n"
                               f"{tail(self.log)}")
        return done

    @property
    def options(self) -> str:
        return (f"-p {self.port} -k {self.sock} -c listen_addresses=127.0.0.1 -c fsync=off "
                f"-c max_connections=200 -c shared_buffers=64MB")

    def start(self) -> None:
        self._run("pg_ctl", "-D", str(self.data), "-l", str(self.log), "-o", self.options,
                  "-w", "-t", "30", "start")

    def stop(self) -> None:
        self._run("pg_ctl", "-D", str(self.data), "-m", "fast", "-w", "-t", "30", "stop")

    def restart(self) -> None:
        self._run("pg_ctl", "-D", str(self.data), "-l", str(self.log), "-o", self.options,
                  "-m", "fast", "-w", "-t", "30", "restart")

    def is_running(self) -> bool:
        cmd = [str(self.bin / "pg_ctl"), "-D", str(self.data), "status"]
        if self._as_postgres:
            cmd = ["runuser", "-u", "postgres", "--", *cmd]
        return subprocess.run(cmd, capture_output=True, timeout=20).returncode == 0

    def url(self, dbname: str) -> str:
        return f"postgres://postgres@127.0.0.1:{self.port}/{dbname}"

    def connect(self, dbname: str, **kw):
        import psycopg

        return psycopg.connect(host="127.0.0.1", port=self.port, user="postgres", dbname=dbname,
                               connect_timeout=5, **kw)

    def createdb(self, dbname: str) -> None:
        with self.connect("postgres", autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{dbname}"')

    def destroy(self) -> None:
        try:
            if self.data.exists() and self.is_running():
                self._run("pg_ctl", "-D", str(self.data), "-m", "immediate", "-w", "-t", "30",
                          "stop")
        finally:
            shutil.copy(self.log, LOGS / "postgres.log") if self.log.exists() else None
            shutil.rmtree(self.dir, ignore_errors=True)


# --------------------------------------------------------------------------- Redis


class RedisServer:
    """``redis-server`` of our own on 127.0.0.1:<port>; nothing kept on disk."""

    def __init__(self, preferred_port: int = 6390):
        self.exe = shutil.which("redis-server")
        if self.exe is None:
            raise FileNotFoundError("redis-server")
        self.port = free_port(preferred_port)
        self.dir = Path(tempfile.mkdtemp(prefix="fleetsvc-faults-redis-"))
        self.proc: subprocess.Popen | None = None
        self.frozen = False
        self.start()

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def client(self):
        import redis

        return redis.Redis(host="127.0.0.1", port=self.port, db=0, socket_timeout=2,
                           socket_connect_timeout=2)

    def start(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            return
        log = open(LOGS / "redis.log", "a")  # noqa: SIM115 - owned by the process
        self.proc = subprocess.Popen(
            [self.exe, "--port", str(self.port), "--bind", "127.0.0.1", "--save", "",
             "--appendonly", "no", "--daemonize", "no", "--dir", str(self.dir)],
            stdout=log, stderr=subprocess.STDOUT)
        log.close()
        wait_for(self.ping, 15, what=f"redis on port {self.port}")

    def ping(self) -> bool:
        try:
            return bool(self.client().ping())
        except Exception:
            return False

    def stop(self) -> None:
        self.thaw()
        if self.proc is not None:
            stop_process(self.proc)
        self.proc = None

    def freeze(self) -> None:
        """SIGSTOP: the port still accepts connections, nothing answers (a hung broker)."""
        assert self.proc is not None
        self.proc.send_signal(signal.SIGSTOP)
        self.frozen = True

    def thaw(self) -> None:
        if self.frozen and self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGCONT)
        self.frozen = False

    def destroy(self) -> None:
        try:
            self.stop()
        finally:
            shutil.rmtree(self.dir, ignore_errors=True)


# --------------------------------------------------------------------------- app processes


def app_env(db_url: str, redis_url: str | None, **extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items()
           if k not in {"DATABASE_URL", "REDIS_URL", "DJANGO_SETTINGS_MODULE", "DEBUG"}}
    env.update(DATABASE_URL=db_url, SECRET_KEY="test-only-key", DJANGO_SETTINGS_MODULE=
               "fleetsvc.settings", PYTHONUNBUFFERED="1", ALLOWED_HOSTS="127.0.0.1,localhost")
    if redis_url:
        env["REDIS_URL"] = redis_url
    env.update(extra)
    return env


class Worker:
    """One Celery worker process (solo pool: the job runs in this very process)."""

    def __init__(self, env: dict[str, str], name: str):
        self.name = name
        self.log = LOGS / f"worker-{name}.log"
        out = open(self.log, "w")  # noqa: SIM115 - owned by the process
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "celery", "-A", "fleetsvc", "worker", "--pool=solo",
             "--loglevel=INFO", "--without-gossip", "--without-mingle", "--without-heartbeat",
             "-n", f"{name}@%h"],
            cwd=ROOT, env=env, stdout=out, stderr=subprocess.STDOUT)
        out.close()

    def text(self) -> str:
        return self.log.read_text(errors="replace") if self.log.exists() else ""

    def wait_ready(self, timeout: float = 60) -> None:
        def ready():
            if self.proc.poll() is not None:
                raise RuntimeError(f"worker {self.name} exited:\n{tail(self.log)}")
            return re.search(r"\bready\.", self.text())
        wait_for(ready, timeout, interval=0.2, what=f"worker {self.name} ready")

    def received(self) -> list[str]:
        return re.findall(r"Task analytics\.tasks\.analyse_vehicle\[([0-9a-f-]+)\] received",
                          self.text())

    def succeeded(self) -> list[tuple[str, str]]:
        return re.findall(
            r"Task analytics\.tasks\.analyse_vehicle\[([0-9a-f-]+)\] succeeded in [0-9.]+s: (\S+)",
            self.text())

    def kill9(self) -> None:
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(timeout=10)

    def stop(self) -> None:
        stop_process(self.proc, timeout=20)


class WebServer:
    """gunicorn serving the app on 127.0.0.1:<port> (sync workers: one DB connection each)."""

    def __init__(self, env: dict[str, str], preferred_port: int = 8790, workers: int = 2):
        self.port = free_port(preferred_port)
        self.log = LOGS / "gunicorn.log"
        out = open(self.log, "w")  # noqa: SIM115 - owned by the process
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "gunicorn", "fleetsvc.wsgi", "--bind",
             f"127.0.0.1:{self.port}", "--workers", str(workers), "--worker-class", "sync",
             "--timeout", "30", "--graceful-timeout", "5", "--access-logfile", "-",
             "--error-logfile", "-"],
            cwd=ROOT, env=env, stdout=out, stderr=subprocess.STDOUT)
        out.close()
        wait_for(self._up, 60, interval=0.2, what="gunicorn answering")

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def _up(self) -> bool:
        import requests

        if self.proc.poll() is not None:
            raise RuntimeError(f"gunicorn exited:\n{tail(self.log)}")
        try:
            return requests.get(self.base + "/signin/", timeout=2).status_code == 200
        except requests.RequestException:
            return False

    def worker_pids(self) -> set[int]:
        out = subprocess.run(["ps", "-o", "pid=", "--ppid", str(self.proc.pid)],
                             capture_output=True, text=True, timeout=10).stdout
        return {int(p) for p in out.split()}

    def stop(self) -> None:
        stop_process(self.proc, timeout=20)


def signed_in_session(base: str, username: str, password: str = PASSWORD):
    """A ``requests.Session`` signed in through the sign-in form (CSRF cookie and field)."""
    import requests

    s = requests.Session()
    page = s.get(base + "/signin/", timeout=5)
    token = re.search(r'name="csrfmiddlewaretoken" value="([^"]+)"', page.text).group(1)
    r = s.post(base + "/signin/", data={"username": username, "password": password,
                                        "csrfmiddlewaretoken": token},
               headers={"Referer": base + "/signin/"}, timeout=10, allow_redirects=False)
    if r.status_code != 302:
        raise RuntimeError(f"sign-in as {username} answered {r.status_code}")
    return s
