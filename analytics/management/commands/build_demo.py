"""``python manage.py build_demo``: build the invented demo scenario and analyse it."""
from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError

DEFAULT_PASSWORD = "demo-pass-2026"


class Command(BaseCommand):
    help = "Build the invented demo scenario (two workshops, two fleets, ~60 vehicles; demo data)."

    def add_arguments(self, parser):
        parser.add_argument("--password", default=DEFAULT_PASSWORD,
                            help=f"password of the demo personas (default {DEFAULT_PASSWORD})")
        parser.add_argument("--seed", type=int, default=2026)
        parser.add_argument("--reset", action="store_true", help="delete demo data first")
        parser.add_argument("--if-missing", action="store_true",
                            help="keep existing demo data (and what was recorded on it) if present")
        parser.add_argument("--no-analysis", action="store_true",
                            help="skip the analysis of every vehicle at the end")

    def handle(self, *args, password, seed, reset, if_missing, no_analysis, **options):
        from analytics import services
        from analytics.demo import scenario
        from inspections.models import Workshop

        if reset:
            services.demo_delete()
        if if_missing and Workshop.objects.filter(is_demo=True).exists():
            self.stdout.write("Demo data already present; kept as it is (use --reset to rebuild).")
            no_analysis = True
        else:
            try:
                counts = scenario.build(password=password, seed=seed)
            except RuntimeError as exc:
                raise CommandError(str(exc), returncode=2) from None
            self.stdout.write("Demo data built (invented scenario, labelled demo): " + ", ".join(
                f"{v} {k}" for k, v in counts.items()))
        if not no_analysis:
            with services.owner_notifications_paused():  # no PDFs mailed for a fresh demo
                n = services.fleet_recompute()
            self.stdout.write(f"Analysed {n} vehicles.")
        self.stdout.write("Sign in at http://127.0.0.1:8000/ as:")
        for user, role in [("demo-tech", "technician, Eastgate Service Bay"),
                           ("demo-manager", "manager, Eastgate Service Bay"),
                           ("demo-owner", "owner of two private cars")]:
            self.stdout.write(f"  {user:14s} password {password!r}  ({role})")
