"""The Celery application. Settings come from Django's settings under the CELERY_ prefix."""
import os

from celery import Celery
from celery.signals import task_prerun, worker_process_init

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "fleetsvc.settings")

app = Celery("fleetsvc")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()


@worker_process_init.connect
def _warm(**_kwargs) -> None:
    """Each worker process loads the platforms' corner files and criteria as it starts, then moves
    everything it holds so far (modules, caches) out of the cyclic collector's sight: later
    collections walk only what jobs allocate."""
    import gc

    from analytics.platform_cache import warm_caches

    warm_caches()
    gc.freeze()


@task_prerun.connect
def _reuse_db_connections(task=None, **_kwargs) -> None:
    """Before a job on a worker: Django's per-request connection policy — a connection older than
    ``CONN_MAX_AGE``, unusable or left outside autocommit is closed, the others kept (see
    ``CELERY_DB_REUSE_MAX``). Not for a job run in-process (eagerly): it runs inside its caller's
    request or transaction, whose connection is not the job's to close."""
    if task is not None and getattr(task.request, "is_eager", False):
        return
    from django.db import close_old_connections

    close_old_connections()
