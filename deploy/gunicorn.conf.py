"""gunicorn settings for fleetsvc: ``gunicorn -c deploy/gunicorn.conf.py fleetsvc.wsgi``."""
import multiprocessing
import os

bind = os.environ.get("FLEETSVC_BIND", "127.0.0.1:8000")
workers = int(os.environ.get("FLEETSVC_WEB_WORKERS", multiprocessing.cpu_count() * 2 + 1))
threads = int(os.environ.get("FLEETSVC_WEB_THREADS", "2"))
timeout = 30
graceful_timeout = 20
max_requests = 2000
max_requests_jitter = 200
accesslog = "-"
errorlog = "-"
