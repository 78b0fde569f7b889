"""gunicorn settings for the API in production (`gunicorn -c python:service.gunicorn_conf ...`).

Only gunicorn's own knobs live here; the application's settings are DRAWYARD_* variables read by
service/config.py. Command-line flags (--bind, --workers) override these values.
"""

import os

from service.config import load_settings
from service.structured_logs import TEXT_FORMAT

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
# The app writes each request's access line itself, as JSON with its request id
# (service/request_records.py); gunicorn's own lines go through the same formatter as the app's,
# so DRAWYARD_LOG_FORMAT=text makes every line of the API plain.
accesslog = None
errorlog = "-"
loglevel = os.environ.get("GUNICORN_LOG_LEVEL", "info")
logconfig_dict = {
    "version": 1,
    "disable_existing_loggers": False,
    "formatters": {
        "json": {"()": "service.structured_logs.JsonLineFormatter"},
        "text": {"format": TEXT_FORMAT},
    },
    "filters": {"context": {"()": "service.structured_logs.JobContextFilter"}},
    "handlers": {
        "stderr": {
            "class": "logging.StreamHandler",
            "formatter": "text" if load_settings().log_format == "text" else "json",
            "filters": ["context"],
            "stream": "ext://sys.stderr",
        }
    },
    "loggers": {
        "gunicorn.error": {"handlers": ["stderr"], "level": loglevel.upper(), "propagate": False},
    },
    # The app puts its own JSON handler on the root logger (service/structured_logs.py).
    "root": {"level": "INFO", "handlers": []},
}
# Behind the compose file's network (or a reverse proxy) the client address arrives in headers.
forwarded_allow_ips = os.environ.get("FORWARDED_ALLOW_IPS", "127.0.0.1")
