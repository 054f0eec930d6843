"""The Celery application. Settings come from Django's settings under the CELERY_ prefix."""
import os

from celery import Celery

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "fleetsvc.settings")

app = Celery("fleetsvc")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()
