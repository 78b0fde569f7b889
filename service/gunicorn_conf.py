"""gunicorn settings for the API in production (`gunicorn -c python:service.gunicorn_conf ...`).

Only gunicorn's own knobs live here; the application's settings are DRAWYARD_* variables read by
service/config.py. Command-line flags (--bind, --workers) override these values.
"""

import os

bind = os.environ.get("GUNICORN_BIND", "0.0.0.0:8000")
# WEB_CONCURRENCY is the conventional name platforms set for the number of web processes.
workers = int(os.environ.get("WEB_CONCURRENCY", "2"))
# Each worker reads whole requests in an event loop before an app thread sees them, so slow or
# idle clients cannot hold the threads (service/buffered_worker.py); its loop keeps heart-beating
# to the arbiter while a thread streams a large draws download.
worker_class = "service.buffered_worker.BufferedRequestWorker"
threads = int(os.environ.get("GUNICORN_THREADS", "4"))
timeout = 120
graceful_timeout = 10
keepalive = 5
accesslog = "-"
errorlog = "-"
loglevel = os.environ.get("GUNICORN_LOG_LEVEL", "info")
# Behind the compose file's network (or a reverse proxy) the client address arrives in headers.
forwarded_allow_ips = os.environ.get("FORWARDED_ALLOW_IPS", "127.0.0.1")
