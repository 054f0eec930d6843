"""The committed migrations match the models (a missing migration fails here, not in production)."""
from io import StringIO

import pytest
from django.core.management import call_command


@pytest.mark.django_db
def test_no_model_change_is_missing_a_migration():
    out = StringIO()
    try:
        call_command("makemigrations", "--check", "--dry-run", stdout=out, stderr=out)
    except SystemExit as exc:  # makemigrations --check exits 1 when changes are pending
        pytest.fail(f"models changed without a migration (exit {exc.code}): {out.getvalue()}")
