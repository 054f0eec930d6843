"""Load benchmark of fleetsvc on loopback: gunicorn + PostgreSQL + a Celery worker, locust headless.

    make bench-load            # or: .venv/bin/python bench/bench_load.py [--users 10,50] [--run-time 20]

What it does, every step bounded in time:

1. builds the demo into a dedicated database (``fleetsvc_bench`` on the local PostgreSQL, dropped
   and made again; ``manage.py migrate`` + ``manage.py build_demo``);
2. starts a Redis of its own on a free loopback port, a Celery worker (prefork, 2 processes) and
   gunicorn with ``deploy/gunicorn.conf.py`` on 127.0.0.1;
3. warms every gunicorn worker (their first request imports the pages' code), then runs locust
   headless once per page and user count (``-u N -r N --run-time``): the sign-in page (baseline:
   a template and a CSRF cookie, no database), the fleet view, the vehicle view and session
   submit. Every simulated user signs in first and then waits 1–3 s between requests (an
   actively clicking user). The N sign-ins at the start (Argon2 hashing, ~5 s of the two cores
   at 50 users) are the ramp-up: latencies are of the page requests sent once every user has
   signed in — N users at once, the steady state — and the requests of the ramp-up are counted
   apart ("ramp-up"); errors count failed answers of the whole run, sign-ins included; requests
   cut off when the run stopped are counted apart ("unfinished");
4. after each submit run, waits for the queue to drain and measures, in the database, the time from
   each session's write (its analysis request, same transaction) to the first stored result whose
   input key includes that session (the sessions submitted in the steady state);
5. prints one table with each figure beside its target and the baseline, and writes
   ``var/bench/load-results.json``.

This file is also the locustfile: locust imports it (``__name__ != "__main__"``) and finds the
user class; the driver never imports locust itself.
"""
from __future__ import annotations

import itertools
import json
import os
import random
import re
import sys
import time
import uuid
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
THINK_S = (1.0, 3.0)

# --------------------------------------------------------------------------- the locust side

if __name__ != "__main__":
    from locust import HttpUser, between, events, task

    CFG = json.loads(Path(os.environ["BENCH_CONFIG"]).read_text())
    SCENARIO = os.environ["BENCH_SCENARIO"]
    SAMPLES: list = []
    SIGNED_IN: list[float] = []
    SESSIONS: list[list] = []
    STARTED = [0]  # page requests sent; those never answered by the end count as errors
    _slots = itertools.count()

    @events.request.add_listener
    def _record(request_type, name, response_time, response_length, exception=None,
                start_time=None, **kw):
        SAMPLES.append([name, start_time, response_time, exception is None])

    @events.quitting.add_listener
    def _dump(environment, **kw):
        Path(os.environ["BENCH_OUT"]).write_text(json.dumps(
            {"samples": SAMPLES, "signed_in": SIGNED_IN, "sessions": SESSIONS,
             "started": STARTED[0]}))

    class Visitor(HttpUser):
        wait_time = between(*THINK_S)

        def on_start(self):
            self.slot = next(_slots)
            # A new connection per request, as nginx's default proxying to gunicorn does (HTTP/1.0
            # upstream): no keep-alive race with gunicorn closing an idle connection.
            self.client.headers["Connection"] = "close"
            if SCENARIO == "baseline":
                SIGNED_IN.append(time.time())
                return
            if SCENARIO == "submit":
                mine = CFG["assignments"][self.slot % len(CFG["assignments"])]
                self.username = mine["username"]
                self.vehicles = itertools.cycle(mine["vehicles"])
                self.odometer = {vid: odo for vid, odo in mine["vehicles"]}
            else:
                self.username = CFG["manager"]
            page = self.client.get("/signin/", name="signin (setup)")
            token = re.search(r'name="csrfmiddlewaretoken" value="([^"]+)"', page.text).group(1)
            self.client.post("/signin/", name="signin (setup)", allow_redirects=False,
                             data={"username": self.username, "password": CFG["password"],
                                   "csrfmiddlewaretoken": token})
            SIGNED_IN.append(time.time())

        @task
        def visit(self):
            STARTED[0] += 1
            if SCENARIO == "baseline":
                self.client.get("/signin/", name="sign-in page (baseline)")
            elif SCENARIO == "fleet":
                self.client.get("/analysis/fleet/", name="fleet view")
            elif SCENARIO == "vehicle":
                vid = random.choice(CFG["manager_vehicles"])
                self.client.get(f"/analysis/vehicles/{vid}/", name="vehicle view")
            else:
                self.submit()

        def submit(self):
            vid, _ = next(self.vehicles)
            self.odometer[vid] += 500
            readings = {c: {"toe_deg": f"{random.uniform(-0.05, 0.2):.3f}", "toe_unit": "angle",
                            "camber_deg": f"{random.uniform(-1.5, -0.3):.2f}",
                            **({"caster_deg": "4.0"} if c.startswith("F") else {})}
                        for c in ("FL", "FR", "RL", "RR")}
            body = {"client_token": str(uuid.uuid4()), "kind": "as_found",
                    "odometer_km": str(self.odometer[vid]), "odometer_unit": "km",
                    "equipment_id": "RIG-BENCH", "equipment_calibrated_on": "2026-01-10",
                    "readings": readings, "checks": []}
            with self.client.post(f"/bay/vehicles/{vid}/sessions/submit", json=body,
                                  name="session submit", catch_response=True,
                                  headers={"X-CSRFToken": self.client.cookies.get("csrftoken", "")}
                                  ) as r:
                try:
                    data = r.json()
                except ValueError:
                    data = {}
                if r.status_code == 200 and data.get("ok"):
                    SESSIONS.append([data["session_id"], vid, time.time()])
                else:
                    r.failure(f"{r.status_code}: {str(data.get('errors'))[:200]}")


# --------------------------------------------------------------------------- the driver


def warm_up(host: str, rounds: int = 40) -> None:
    """Some concurrent requests for the sign-in page, so that every gunicorn worker has loaded the
    application before anything is measured."""
    import urllib.request
    from concurrent.futures import ThreadPoolExecutor

    def get(_):
        with urllib.request.urlopen(host + "/signin/", timeout=30) as r:
            return r.status

    with ThreadPoolExecutor(8) as pool:
        list(pool.map(get, range(rounds)))


def main() -> int:
    import argparse
    import subprocess

    import numpy as np
    import psycopg

    sys.path.insert(0, str(ROOT))
    from tests.faults.procs import RedisServer, free_port, stop_process, tail, wait_for

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--users", default="10,50", help="comma-separated user counts (default 10,50)")
    ap.add_argument("--run-time", type=int, default=30, help="seconds per locust run (default 30)")
    ap.add_argument("--scenarios", default="baseline,fleet,vehicle,submit",
                    help="comma-separated scenarios to run (default: all four)")
    ap.add_argument("--db", default="fleetsvc_bench", help="dedicated database (dropped, made)")
    ap.add_argument("--pg-host", default="/var/run/postgresql", help="PostgreSQL socket dir")
    ap.add_argument("--password", default="bench-pass-2026")
    ap.add_argument("--keep-db", action="store_true", help="reuse a built database; keep it")
    args = ap.parse_args()
    users = [int(u) for u in args.users.split(",")]
    out_dir = ROOT / "var" / "bench"
    out_dir.mkdir(parents=True, exist_ok=True)
    (ROOT / "var" / "faults").mkdir(parents=True, exist_ok=True)  # the Redis helper's log
    py = sys.executable
    db_url = f"postgres:///{args.db}?host={args.pg_host}"
    base_env = {k: v for k, v in os.environ.items() if k not in {"REDIS_URL", "DEBUG"}}
    base_env.update(DATABASE_URL=db_url, SECRET_KEY="bench-only-key", DJANGO_SETTINGS_MODULE=
                    "fleetsvc.settings", ALLOWED_HOSTS="127.0.0.1,localhost")

    def run(cmd, log: Path, env=base_env, timeout=900, ok=(0,)):
        with open(log, "w") as fh:
            done = subprocess.run(cmd, cwd=ROOT, env=env, stdout=fh, stderr=subprocess.STDOUT,
                                  timeout=timeout)
        if done.returncode not in ok:
            raise SystemExit(f"{' '.join(map(str, cmd[:4]))} failed; see {log}:\n{tail(log)}")

    def connect():
        return psycopg.connect(host=args.pg_host, dbname=args.db, autocommit=True)

    # 1. the dedicated database with the demo
    t0 = time.monotonic()
    with psycopg.connect(host=args.pg_host, dbname="postgres", autocommit=True) as admin:
        exists = admin.execute("SELECT 1 FROM pg_database WHERE datname=%s", (args.db,)).fetchone()
        if exists and not args.keep_db:
            admin.execute(f'DROP DATABASE "{args.db}" WITH (FORCE)')
        if not exists or not args.keep_db:
            admin.execute(f'CREATE DATABASE "{args.db}"')
            print(f"building the demo into {args.db} (migrate + build_demo) …", flush=True)
            run([py, "manage.py", "migrate", "--noinput"], out_dir / "migrate.log")
            run([py, "manage.py", "build_demo", "--password", args.password],
                out_dir / "build_demo.log")
            print(f"  built in {time.monotonic() - t0:.0f} s", flush=True)

    with connect() as conn:
        manager_ws, = conn.execute("SELECT p.workshop_id FROM inspections_profile p JOIN auth_user u"
                                   " ON u.id=p.user_id WHERE u.username='demo-manager'").fetchone()
        manager_vehicles = [r[0] for r in conn.execute(
            "SELECT id FROM inspections_vehicle WHERE workshop_id=%s ORDER BY id", (manager_ws,))]
        techs = conn.execute("SELECT u.username, p.workshop_id FROM inspections_profile p JOIN "
                             "auth_user u ON u.id=p.user_id WHERE p.role='technician' AND "
                             "u.username LIKE 'demo-%%' ORDER BY u.username").fetchall()
        fleet_size, = conn.execute("SELECT count(*) FROM inspections_vehicle").fetchone()
        sessions_before, = conn.execute("SELECT count(*) FROM inspections_alignmentsession").fetchone()

    def odometers() -> dict[int, int]:
        with connect() as conn:
            rows = conn.execute(
                "SELECT v.id, greatest(coalesce((SELECT max(odometer_km) FROM "
                "inspections_alignmentsession s WHERE s.vehicle_id=v.id), 0), coalesce((SELECT "
                "max(odometer_km) FROM inspections_componentcheck c WHERE c.vehicle_id=v.id), 0), "
                "coalesce((SELECT max(odometer_km) FROM inspections_serviceevent e WHERE "
                "e.vehicle_id=v.id), 0)), v.workshop_id FROM inspections_vehicle v").fetchall()
        return {vid: (odo, ws) for vid, odo, ws in rows}

    def assignments(n: int) -> list[dict]:
        """Each simulated technician gets vehicles of their own: odometers only go up."""
        odo = odometers()
        pools = [(name, sorted(v for v, (_, w) in odo.items() if w == ws)) for name, ws in techs]
        total = sum(len(p) for _, p in pools)
        out = []
        for i, (name, pool) in enumerate(pools):
            share = n - len(out) if i == len(pools) - 1 else round(n * len(pool) / total)
            share = max(1, min(share, len(pool)))
            for k in range(share):
                out.append({"username": name,
                            "vehicles": [[v, odo[v][0] + 1000] for v in pool[k::share]]})
        return out

    # 2. Redis, a worker and gunicorn of our own
    redis = RedisServer(6391)
    worker = web = None
    try:
        env = {**base_env, "REDIS_URL": redis.url}
        worker_log = open(out_dir / "worker.log", "w")  # noqa: SIM115 - closed in finally
        worker = subprocess.Popen([py, "-m", "celery", "-A", "fleetsvc", "worker", "--concurrency",
                                   "2", "--loglevel", "INFO", "--without-gossip", "--without-mingle",
                                   "-n", "bench@%h"], cwd=ROOT, env=env, stdout=worker_log,
                                  stderr=subprocess.STDOUT)
        port = free_port(8791)
        web_log = open(out_dir / "gunicorn.log", "w")  # noqa: SIM115 - closed in finally
        web = subprocess.Popen([py, "-m", "gunicorn", "-c", "deploy/gunicorn.conf.py",
                                "fleetsvc.wsgi"], cwd=ROOT, env={**env, "FLEETSVC_BIND":
                                                                 f"127.0.0.1:{port}"},
                               stdout=web_log, stderr=subprocess.STDOUT)
        host = f"http://127.0.0.1:{port}"

        def web_up():
            import urllib.request

            if web.poll() is not None:
                raise SystemExit(f"gunicorn exited:\n{tail(out_dir / 'gunicorn.log')}")
            try:
                with urllib.request.urlopen(host + "/signin/", timeout=2) as r:
                    return r.status == 200
            except OSError:
                return False
        wait_for(web_up, 60, interval=0.3, what="gunicorn answering")
        wait_for(lambda: "ready." in (out_dir / "worker.log").read_text(), 60, interval=0.3,
                 what="worker ready")
        # 3. the locust runs
        results = []

        def locust(scenario: str, n: int) -> dict:
            cfg = {"password": args.password, "manager": "demo-manager",
                   "manager_vehicles": manager_vehicles,
                   "assignments": assignments(n) if scenario == "submit" else []}
            cfg_path, out_path = out_dir / f"cfg-{scenario}-{n}.json", out_dir / f"out-{scenario}-{n}.json"
            cfg_path.write_text(json.dumps(cfg))
            out_path.unlink(missing_ok=True)
            print(f"  {scenario:8s} {n:3d} users, {args.run_time} s …", flush=True)
            started = time.time()
            run([py, "-m", "locust", "-f", str(Path(__file__).resolve()), "--headless", "-u", str(n),
                 "-r", str(n), "--run-time", f"{args.run_time}s", "--host", host, "--only-summary",
                 "--loglevel", "WARNING", "--stop-timeout", "30"],
                out_dir / f"locust-{scenario}-{n}.log",
                env={**base_env, "BENCH_CONFIG": str(cfg_path), "BENCH_OUT": str(out_path),
                     "BENCH_SCENARIO": scenario}, timeout=args.run_time + 120,
                ok=(0, 1))  # locust exits 1 when some requests failed: counted below
            data = json.loads(out_path.read_text())
            pages = [s for s in data["samples"] if not s[0].startswith("signin")]
            steady = max(data["signed_in"], default=0.0)  # every user signed in from here on
            measured = [s for s in pages if s[1] >= steady]
            first = min((s[1] for s in measured), default=started)
            ended = max((s[1] + s[2] / 1000 for s in measured), default=first)
            times = np.array([s[2] for s in measured if s[3]], float)
            unanswered = max(0, data["started"] - len(pages))
            row = {"scenario": scenario, "users": n, "requests": len(measured),
                   "ramp_up": len(pages) - len(measured),
                   "rate": len(measured) / max(ended - first, 1e-9),
                   "errors": sum(1 for s in data["samples"] if not s[3]),
                   "unfinished": unanswered, "all_requests": len(data["samples"]),
                   "p50": float(np.percentile(times, 50)) if times.size else None,
                   "p95": float(np.percentile(times, 95)) if times.size else None,
                   "p99": float(np.percentile(times, 99)) if times.size else None}
            if scenario == "submit":
                row.update(advice([x for x in data["sessions"] if x[2] >= steady], started))
            results.append(row)
            return row

        def advice(sessions: list, started: float) -> dict:
            """Drain the queue, then time each session's write → first result that saw it."""
            def drained():
                with connect() as conn:
                    return conn.execute("SELECT count(*) FROM analytics_analysisrequest WHERE "
                                        "done_at IS NULL").fetchone()[0] == 0
            t = time.monotonic()
            try:
                wait_for(drained, 300, interval=1, what="analysis queue drained")
            except TimeoutError:
                pass
            drain_s = time.monotonic() - t
            ids = [s for s, *_ in sessions]
            with connect() as conn:
                rows = conn.execute(
                    "SELECT s.id, extract(epoch FROM min(r.computed_at) - q.created_at) "
                    "FROM unnest(%s::bigint[]) AS s(id) "
                    "JOIN analytics_analysisrequest q ON q.reason = 'AlignmentSession:' || s.id "
                    "LEFT JOIN analytics_analysisresult r ON r.vehicle_id = q.vehicle_id AND "
                    "  substring(r.input_key FROM '^s([0-9]+)[.]')::bigint >= s.id "
                    "GROUP BY s.id, q.created_at", (ids,)).fetchall()
            lat = np.array([float(x) for _, x in rows if x is not None])
            return {"sessions": len(ids), "advised": int(lat.size),
                    "advice_missing": len(ids) - int(lat.size), "drain_s": drain_s,
                    "advice_p50": float(np.percentile(lat, 50) * 1000) if lat.size else None,
                    "advice_p95": float(np.percentile(lat, 95) * 1000) if lat.size else None,
                    "advice_p99": float(np.percentile(lat, 99) * 1000) if lat.size else None}

        print(f"load runs against {host} (think time {THINK_S[0]:g}–{THINK_S[1]:g} s per user):",
              flush=True)
        warm_up(host)
        for scenario in args.scenarios.split(","):
            for n in users:
                locust(scenario, n)
    finally:
        for proc in (web, worker):
            if proc is not None:
                stop_process(proc, timeout=30)
        redis.destroy()
        if not args.keep_db:
            with psycopg.connect(host=args.pg_host, dbname="postgres", autocommit=True) as admin:
                admin.execute(f'DROP DATABASE IF EXISTS "{args.db}" WITH (FORCE)')

    report(results, users, fleet_size, sessions_before)
    (out_dir / "load-results.json").write_text(json.dumps(
        {"when": time.strftime("%Y-%m-%d %H:%M:%S %Z"), "cpus": os.cpu_count(),
         "think_s": THINK_S, "run_time_s": args.run_time, "fleet_vehicles": fleet_size,
         "results": results}, indent=1))
    return 0


TITLES = {"baseline": "sign-in page (baseline)", "fleet": "fleet view `/analysis/fleet/`",
          "vehicle": "vehicle view `/analysis/vehicles/<id>/`",
          "submit": "session submit `POST /bay/vehicles/<id>/sessions/submit`"}


def report(results: list[dict], users: list[int], fleet_size: int, sessions_before: int) -> None:
    def ms(x):
        return "—" if x is None else f"{x:.0f}"

    base = {r["users"]: r for r in results if r["scenario"] == "baseline"}
    lines = [f"Demo fleet: {fleet_size} vehicles, {sessions_before} sessions; "
             f"{os.cpu_count()} CPUs; think time {THINK_S[0]:g}–{THINK_S[1]:g} s per user.", "",
             "| what | users | req/s | p50 ms | p95 ms | p99 ms | errors | unfinished | ramp-up | target "
             "| met |",
             "|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in results:
        target, met = "—", ""
        if r["scenario"] == "fleet" and r["users"] == max(users):
            target = "p95 ≤ 300 ms, 0 errors"
            met = "yes" if r["p95"] is not None and r["p95"] <= 300 and r["errors"] == 0 else "**no**"
        elif r["scenario"] != "baseline":
            target = "0 errors"
            met = "yes" if r["errors"] == 0 else "**no**"
        b = base.get(r["users"])
        rel = f" ({r['p95'] / b['p95']:.1f}× baseline p95)" if (
            b and r is not b and r["p95"] and b["p95"]) else ""
        lines.append(f"| {TITLES[r['scenario']]} | {r['users']} | {r['rate']:.1f} | {ms(r['p50'])} | "
                     f"{ms(r['p95'])}{rel} | {ms(r['p99'])} | {r['errors']}/{r['all_requests']} | "
                     f"{r['unfinished']} | {r['ramp_up']} | {target} | {met} |")
    for r in results:
        if r["scenario"] != "submit":
            continue
        ok = r["advice_p95"] is not None and r["advice_p95"] <= 1000 and r["advice_missing"] == 0
        lines.append(f"| session → stored advice, during submit load | {r['users']} | — | "
                     f"{ms(r['advice_p50'])} | {ms(r['advice_p95'])} | {ms(r['advice_p99'])} | "
                     f"{r['advice_missing']}/{r['sessions']} without advice | — | — | p95 ≤ 1000 ms | "
                     f"{'yes' if ok else '**no**'} |")
    print("\n" + "\n".join(lines))


if __name__ == "__main__":
    sys.exit(main())
