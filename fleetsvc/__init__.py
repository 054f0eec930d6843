"""fleetsvc project package: settings, urls, the Celery app and wsgi."""
from .celery import app as celery_app

__all__ = ["celery_app"]
