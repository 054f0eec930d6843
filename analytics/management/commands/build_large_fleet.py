"""``python manage.py build_large_fleet --vehicles 10000 --seed N``: the large invented demo fleet."""
from __future__ import annotations

import time

from django.core.management.base import BaseCommand, CommandError


class Command(BaseCommand):
    help = ("Build a large invented fleet (demo data) on a dozen demo platforms with PostgreSQL "
            "COPY: five years of quarterly visits per vehicle.")

    def add_arguments(self, parser):
        parser.add_argument("--vehicles", type=int, default=10_000)
        parser.add_argument("--seed", type=int, default=7)
        parser.add_argument("--reset", action="store_true", help="delete the large demo fleet first")

    def handle(self, *args, vehicles, seed, reset, **options):
        from django.db import connection

        from analytics.demo import large_fleet

        if connection.vendor != "postgresql":
            raise CommandError("build_large_fleet needs PostgreSQL (it writes with COPY)",
                               returncode=2)
        if vehicles < 1:
            raise CommandError("--vehicles: must be at least 1", returncode=2)
        if reset:
            large_fleet.delete()
        t0 = time.perf_counter()
        try:
            counts = large_fleet.build(vehicles=vehicles, seed=seed)
        except RuntimeError as exc:
            raise CommandError(str(exc), returncode=2) from None
        self.stdout.write(f"Large demo fleet built in {time.perf_counter() - t0:.1f} s (invented, "
                          "labelled demo): " + ", ".join(f"{v} {k}" for k, v in counts.items()))
        if not connection.in_atomic_block:  # VACUUM cannot run inside a transaction
            t1 = time.perf_counter()
            large_fleet.vacuum()
            self.stdout.write(f"Tables written in bulk vacuumed in {time.perf_counter() - t1:.1f} s")
