"""A worker keeps its database connection between jobs under Django's own policy (CONN_MAX_AGE,
health checks) instead of Celery's close-after-every-task, and never closes the connection of a
job run in-process. Django's documented behaviour of ``close_old_connections`` is the reference
(docs.djangoproject.com, "Persistent connections")."""
from types import SimpleNamespace

import pytest
from django.conf import settings
from django.db import connection

from fleetsvc.celery import _reuse_db_connections, app


def _task(eager: bool):
    return SimpleNamespace(request=SimpleNamespace(is_eager=eager))


def test_celery_reads_the_reuse_count_so_its_fix_up_does_not_close_after_every_task():
    assert app.conf.get("CELERY_DB_REUSE_MAX") == settings.CELERY_DB_REUSE_MAX > 1


@pytest.mark.django_db(transaction=True)
def test_a_worker_job_keeps_a_fresh_connection_and_closes_an_obsolete_one():
    if settings.DATABASES["default"].get("CONN_MAX_AGE", 0) in (0, None):
        pytest.skip("only a database with a finite connection age is reused this way")
    connection.ensure_connection()
    raw = connection.connection
    _reuse_db_connections(task=_task(eager=False))
    assert connection.connection is raw  # kept: younger than CONN_MAX_AGE
    connection.close_at = 0  # as if it had outlived CONN_MAX_AGE
    _reuse_db_connections(task=_task(eager=False))
    assert connection.connection is None  # closed; the next query opens a new one


@pytest.mark.django_db
def test_an_in_process_job_leaves_its_caller_s_connection_alone():
    connection.ensure_connection()
    raw, close_at = connection.connection, connection.close_at
    connection.close_at = 0  # even an obsolete one: the caller's transaction is still open
    try:
        _reuse_db_connections(task=_task(eager=True))
        assert connection.connection is raw and connection.in_atomic_block
    finally:
        connection.close_at = close_at  # the connection outlives this test
