"""Seed the fault tests' own database: ``python -m tests.faults.appctl seed N``.

Run as a subprocess with ``DATABASE_URL`` pointing at the throwaway cluster and ``REDIS_URL``
unset, so the seeding's own analyses run in-process. Prints one JSON line with the ids.
"""
from __future__ import annotations

import json
import sys


def seed(vehicles: int) -> dict:
    import django

    django.setup()
    from django.core.management import call_command

    call_command("migrate", verbosity=0, interactive=False)
    from tests import factories as f
    from tests.analytics.helpers import give_corners, give_history
    from tests.faults.procs import PASSWORD

    workshop = f.make_workshop("Fault-test workshop")
    platform = f.make_platform("Fault-test platform")
    give_corners(platform)
    tech = f.make_user("faults-tech", "technician", workshop=workshop, password=PASSWORD)
    ids = []
    for _ in range(vehicles):
        car = f.make_vehicle(platform=platform, workshop=workshop)
        give_history(car, tech, visits=4, start_days_ago=400)
        ids.append(car.pk)
    return {"vehicles": ids, "technician": tech.username}


if __name__ == "__main__":
    if len(sys.argv) != 3 or sys.argv[1] != "seed":
        sys.exit("usage: python -m tests.faults.appctl seed N")
    print(json.dumps(seed(int(sys.argv[2]))))
