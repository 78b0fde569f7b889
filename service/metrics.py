"""Service metrics with prometheus_client: counters and histograms where things happen, gauges
read from the store at scrape time by aggregate queries.

Counters and histograms follow the library's conventions (prometheus.io, "Metric and label
naming"): base units (seconds), ``_total`` on counters, so that ``rate()`` and
``histogram_quantile()`` work. The API counts requests and submissions; the workers count the
chains and jobs they end and the model evaluations those chains made. Each process writes its own
values; under gunicorn and Celery (several processes, and workers in other containers) they go to
files in PROMETHEUS_MULTIPROC_DIR, a folder every process of the deployment shares, and the scrape
sums them (the library's multiprocess mode). Without that variable (one process, as in unit tests)
the values are this process's own.

Gauges are what the store and the broker hold now: jobs and chains by state (one GROUP BY each)
and the messages waiting in the queue (LLEN). Nothing at scrape time reads chain rows one by one.
"""

from __future__ import annotations

import os
import socket
from collections.abc import Iterator
from datetime import datetime

import redis
from prometheus_client import CollectorRegistry, Counter, Histogram, values
from prometheus_client.core import GaugeMetricFamily, Metric
from prometheus_client.exposition import choose_encoder
from prometheus_client.multiprocess import MultiProcessCollector
from sqlalchemy import func, select

from service.runtime import Runtime
from service.store.models import JOB_STATES, Chain, Job

MULTIPROCESS_VARIABLE = "PROMETHEUS_MULTIPROC_DIR"
# Our own choice: from a one-second toy chain to the four-hour longest a deployment might allow.
CHAIN_DURATION_BUCKETS = (1.0, 5.0, 15.0, 60.0, 300.0, 900.0, 3600.0, 14400.0)
# Celery's Redis transport keeps one list per priority step besides the plain one (steps 3, 6, 9
# by default), named queue + "\x06\x16" + step.
PRIORITY_SEPARATOR = "\x06\x16"
PRIORITY_STEPS = (3, 6, 9)
CHAIN_STATES = ("queued", "running", "succeeded", "failed", "cancelled", "timed_out")


def _multiprocess_folder() -> str | None:
    folder = os.environ.get(MULTIPROCESS_VARIABLE)
    if folder:
        os.makedirs(folder, exist_ok=True)
    return folder or None


if _multiprocess_folder():
    # Each process's values file is named by its id; containers sharing the folder reuse process
    # ids, so the host name goes in too ("-": the library splits file names on "_").
    values.ValueClass = values.MultiProcessValue(
        process_identifier=lambda: f"{socket.gethostname()}-{os.getpid()}"
    )

# registry=None: the scrape builds its own registry (multiprocess files, or these objects).
HTTP_REQUESTS = Counter(
    "drawyard_http_requests", "HTTP requests answered, by route template, method and status.",
    ("route", "method", "status"), registry=None,
)
HTTP_DURATION = Histogram(
    "drawyard_http_request_duration_seconds",
    "Time from a request's arrival in the app to its answer (the library's default buckets).",
    ("route", "method"), registry=None,
)
JOBS_SUBMITTED = Counter(
    "drawyard_jobs_submitted",
    "Jobs stored by a submission (replays of an idempotency key are not).",
    registry=None,
)
JOBS_REFUSED = Counter(
    "drawyard_jobs_refused", "Submissions refused with a 4xx answer, by problem type.",
    ("problem",), registry=None,
)
JOBS_FINISHED = Counter(
    "drawyard_jobs_finished", "Jobs that reached a final state, by that state.", ("state",),
    registry=None,
)
CHAINS_FINISHED = Counter(
    "drawyard_chains_finished", "Chains a worker ended, by final state.", ("state",),
    registry=None,
)
CHAIN_DURATION = Histogram(
    "drawyard_chain_duration_seconds",
    "Wall time of chains a worker ran to the end, from first start (warm-up included).",
    buckets=CHAIN_DURATION_BUCKETS, registry=None,
)
MODEL_EVALUATIONS = Counter(
    "drawyard_model_evaluations",
    "Evaluations of the model in every phase by chains a worker ran to the end: 'gradient' "
    "(log density with its gradient: NUTS, static HMC) or 'log_density' (alone: Metropolis).",
    ("kind",), registry=None,
)
EVALUATING_SECONDS = Counter(
    "drawyard_evaluating_chain_seconds",
    "Wall seconds of the chains counted in drawyard_model_evaluations_total, by the kind of "
    "evaluation they make; rate(evaluations) / rate(seconds) is evaluations per chain-second.",
    ("kind",), registry=None,
)
OWN_METRICS = (
    HTTP_REQUESTS, HTTP_DURATION, JOBS_SUBMITTED, JOBS_REFUSED, JOBS_FINISHED, CHAINS_FINISHED,
    CHAIN_DURATION, MODEL_EVALUATIONS, EVALUATING_SECONDS,
)


def chain_ran(state: str, started_at: datetime | None, finished_at: datetime,
              evaluations: object | None) -> None:
    """A worker ended a chain; for one run to the end, its time and its evaluations too."""
    CHAINS_FINISHED.labels(state).inc()
    if state != "succeeded" or started_at is None:
        return
    seconds = max(0.0, (finished_at - started_at).total_seconds())
    CHAIN_DURATION.observe(seconds)
    if evaluations is None:
        return
    gradient = sum(evaluations.gradient.values())  # type: ignore[attr-defined]
    density = sum(evaluations.log_density.values())  # type: ignore[attr-defined]
    kind = "gradient" if gradient > 0 else "log_density"
    counted = gradient if gradient > 0 else density
    MODEL_EVALUATIONS.labels(kind).inc(counted)
    EVALUATING_SECONDS.labels(kind).inc(seconds)


class StoreCollector:
    """Gauges of what the store and the broker hold at scrape time."""

    def __init__(self, runtime: Runtime):
        self.runtime = runtime

    def collect(self) -> Iterator[Metric]:
        jobs = GaugeMetricFamily("drawyard_jobs", "Jobs in the store by state.", labels=["state"])
        for state, count in _counts_by_state(self.runtime, Job.state, JOB_STATES).items():
            jobs.add_metric([state], count)
        yield jobs
        chains = GaugeMetricFamily(
            "drawyard_chains", "Chains in the store by state.", labels=["state"]
        )
        for state, count in _counts_by_state(self.runtime, Chain.state, CHAIN_STATES).items():
            chains.add_metric([state], count)
        yield chains
        depth = queue_depth(self.runtime)
        if depth is not None:
            queue = GaugeMetricFamily(
                "drawyard_queue_messages", "Task messages waiting in the broker queue.",
                labels=["queue"],
            )
            queue.add_metric([self.runtime.settings.queue], depth)
            yield queue


class ProcessMetrics:
    """This process's own counters and histograms, when there is no multiprocess folder."""

    def collect(self) -> Iterator[Metric]:
        for metric in OWN_METRICS:
            yield from metric.collect()


def _counts_by_state(runtime: Runtime, column, states: tuple[str, ...]) -> dict[str, int]:
    with runtime.sessions() as session:
        rows = session.execute(select(column, func.count()).group_by(column)).all()
    counts = dict.fromkeys(states, 0)
    counts.update({state: int(n) for state, n in rows})
    return counts


def queue_depth(runtime: Runtime) -> int | None:
    """Messages waiting in the Celery queue's Redis lists; None for another broker or no answer."""
    settings = runtime.settings
    if not settings.broker_url.startswith(("redis://", "rediss://")):
        return None
    names = [settings.queue] + [f"{settings.queue}{PRIORITY_SEPARATOR}{s}" for s in PRIORITY_STEPS]
    try:
        client = redis.Redis.from_url(settings.broker_url, socket_timeout=2)
        try:
            pipe = client.pipeline()
            for name in names:
                pipe.llen(name)
            return int(sum(pipe.execute()))
        finally:
            client.close()
    except redis.RedisError:
        return None


def exposition(runtime: Runtime, accept: str = "") -> tuple[bytes, str]:
    """The whole scrape body and its media type, in the format the scraper's Accept header asks
    for (the library's negotiation: the text format 0.0.4 unless OpenMetrics is asked for)."""
    encoder, media_type = choose_encoder(accept)
    registry = CollectorRegistry()
    folder = _multiprocess_folder()
    if folder:
        MultiProcessCollector(registry, path=folder)
    else:
        registry.register(ProcessMetrics())
    registry.register(StoreCollector(runtime))
    return encoder(registry), media_type
