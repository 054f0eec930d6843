"""``manage.py import-records --file F.csv --as USERNAME [--dry-run] [--json]``.

Imports alignment sessions and component checks from a CSV file in fleetsvc's layout (README,
"CSV import and export") as the named user, with that user's access: all or nothing. Prints a
summary (JSON with ``--json``). A refused file: exit status 2, one line per problem on stderr
(``row N, column C: reason``), nothing stored.
"""
from __future__ import annotations

import json
import sys
from pathlib import Path

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand

from inspections.importing import MAX_FILE_BYTES, ImportRefused, import_records


class Command(BaseCommand):
    help = "Import sessions and component checks from a CSV file (all or nothing)."

    def add_arguments(self, parser):
        parser.add_argument("--file", required=True, help="the CSV file (UTF-8, header row first)")
        parser.add_argument("--as", dest="username", required=True,
                            help="the user the records are imported as (their access applies)")
        parser.add_argument("--dry-run", action="store_true",
                            help="check every row and report what would be added; store nothing")
        parser.add_argument("--json", action="store_true", help="print the summary as JSON")

    def _fail(self, lines: list[str]) -> None:
        for line in lines:
            sys.stderr.write(f"import-records: {line}\n")
        raise SystemExit(2)

    def handle(self, *args, **opts):
        path = Path(opts["file"])
        user = get_user_model().objects.filter(username=opts["username"], is_active=True).first()
        if user is None:
            self._fail([f"--as: no active user {opts['username']!r}"])
        try:
            if path.stat().st_size > MAX_FILE_BYTES:
                self._fail([f"--file: {path} is larger than {MAX_FILE_BYTES / 1e6:.0f} MB"])
            data = path.read_bytes()
        except OSError as exc:
            self._fail([f"--file: cannot read {path}: {exc.strerror or exc}"])
        try:
            result = import_records(data=data, filename=path.name, user=user,
                                    dry_run=opts["dry_run"])
        except ImportRefused as exc:
            lines = [str(p) for p in exc.problems]
            if exc.total > len(exc.problems):
                lines.append(f"… and {exc.total - len(exc.problems)} more problem(s)")
            lines.append(f"{path.name}: refused, nothing was imported")
            self._fail(lines)
        summary = result.as_dict()
        if opts["json"]:
            self.stdout.write(json.dumps(summary, sort_keys=True))
            return
        verb = "would add" if result.dry_run else "added"
        self.stdout.write(
            f"{path.name}: {result.rows} rows; {verb} {result.sessions_created} session(s) with "
            f"{result.readings_created} reading(s) and {result.checks_created} check(s); "
            f"{result.sessions_already_stored} session(s) and {result.checks_already_stored} "
            "check(s) were already stored")
