"""The Celery application. Settings come from Django's settings under the CELERY_ prefix."""
import os

from celery import Celery
from celery.signals import worker_process_init

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

    from analytics.fleet_recompute import warm_caches

    warm_caches()
    gc.freeze()
