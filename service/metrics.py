"""Service metrics in the Prometheus text exposition format, version 0.0.4.

Everything is read at scrape time from where it already lives: job and chain rows in the store,
the Celery queue's Redis lists, and a bounded ping of the workers. Chain durations are a histogram
of succeeded chains' wall time (warm-up included). Evaluation rates divide the evaluations of the
model the workers counted for succeeded chains, in every phase (initialisation, step-size searches,
warm-up, sampling), by those chains' wall time: evaluations with the gradient for the chains that
made any (NUTS, static HMC), of the log density alone for those that made none (random-walk
Metropolis). Chains stored before the counts existed (migration 0005) count their stored
sampling-phase leapfrog steps instead, a lower bound; such Metropolis chains are left out. Reused
chains have no start or finish time: no worker ran them, so they are in neither figure.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np
import redis
from sqlalchemy import Float, cast, func, select

from service.evaluation_counts import COLUMNS as COUNT_COLUMNS
from service.runtime import Runtime
from service.store.arrays import decode_array
from service.store.models import JOB_STATES, Chain, ChainArray, Job

MEDIA_TYPE = "text/plain; version=0.0.4; charset=utf-8"
DURATION_BUCKETS = (1.0, 5.0, 15.0, 60.0, 300.0, 900.0, 3600.0, 14400.0)
# Celery's Redis transport keeps one list per priority step besides the plain one (steps 3, 6, 9
# by default), named queue + "\x06\x16" + step.
PRIORITY_SEPARATOR = "\x06\x16"
PRIORITY_STEPS = (3, 6, 9)

# Stored arrays never change once a chain succeeded, so each chain's step count is read once;
# None for a chain without the statistic (random-walk Metropolis).
_leapfrog_by_chain: dict[tuple[str, int], int | None] = {}


def _escape(value: str) -> str:
    return value.replace("\\", "\\\\").replace("\n", "\\n").replace('"', '\\"')


def _number(value: float) -> str:
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "+Inf" if value > 0 else "-Inf"
    return repr(float(value)) if not float(value).is_integer() else str(int(value))


def _family(name: str, kind: str, text: str, samples: Iterable[tuple[str, dict, float]]) -> str:
    lines = [f"# HELP {name} {text}", f"# TYPE {name} {kind}"]
    for sample, labels, value in samples:
        label_text = ",".join(f'{k}="{_escape(str(v))}"' for k, v in labels.items())
        lines.append(
            f"{sample}{{{label_text}}} {_number(value)}" if labels else f"{sample} {_number(value)}"
        )
    return "\n".join(lines) + "\n"


def _duration_seconds(runtime: Runtime):
    """A SQL expression for a chain's wall time in seconds on this backend."""
    if runtime.engine.dialect.name == "sqlite":
        return (func.julianday(Chain.finished_at) - func.julianday(Chain.started_at)) * 86400.0
    return cast(func.extract("epoch", Chain.finished_at - Chain.started_at), Float)


def job_counts(runtime: Runtime) -> dict[str, int]:
    with runtime.sessions() as session:
        rows = session.execute(select(Job.state, func.count()).group_by(Job.state)).all()
    counts = dict.fromkeys(JOB_STATES, 0)
    counts.update({state: int(n) for state, n in rows})
    return counts


def chain_durations(runtime: Runtime) -> np.ndarray:
    """Wall times of succeeded chains (those a worker ran: reused chains have no times)."""
    with runtime.sessions() as session:
        seconds = session.scalars(
            select(_duration_seconds(runtime)).where(
                Chain.state == "succeeded",
                Chain.started_at.is_not(None),
                Chain.finished_at.is_not(None),
            )
        ).all()
    return np.asarray(list(seconds), dtype=np.float64)


def leapfrog_total(runtime: Runtime, keys: list[tuple[str, int]]) -> int:
    missing = [key for key in keys if key not in _leapfrog_by_chain]
    if missing:
        jobs = sorted({job for job, _ in missing})
        with runtime.sessions() as session:
            rows = session.execute(
                select(Chain.job_id, Chain.chain_index, ChainArray.data, ChainArray.sha256)
                .join(ChainArray, ChainArray.chain_id == Chain.id)
                .where(
                    Chain.job_id.in_(jobs),
                    ChainArray.kind == "stat",
                    ChainArray.name == "gradient_calls",
                )
            ).all()
        for key in missing:
            _leapfrog_by_chain[key] = None
        for job_id, index, data, sha in rows:
            _leapfrog_by_chain[(job_id, index)] = int(np.sum(decode_array(data, sha)))
    return sum(_leapfrog_by_chain.get(key) or 0 for key in keys)


def evaluation_rates(runtime: Runtime) -> tuple[float, float]:
    """Gradient evaluations per second over succeeded chains that evaluate gradients, and
    log-density-only evaluations per second over those that do not (see the module docstring)."""
    with runtime.sessions() as session:
        rows = session.execute(
            select(
                Chain.job_id,
                Chain.chain_index,
                _duration_seconds(runtime),
                *(getattr(Chain, name) for name in COUNT_COLUMNS),
            ).where(
                Chain.state == "succeeded",
                Chain.started_at.is_not(None),
                Chain.finished_at.is_not(None),
            )
        ).all()
    gradients = gradient_seconds = densities = density_seconds = 0.0
    uncounted: list[tuple[tuple[str, int], float]] = []
    for job_id, index, seconds, *counts in rows:
        if any(count is None for count in counts):
            uncounted.append(((job_id, index), float(seconds)))
            continue
        by_name = dict(zip(COUNT_COLUMNS, counts, strict=True))
        chain_gradients = by_name["warmup_gradient_evaluations"] + by_name[
            "sampling_gradient_evaluations"
        ]
        if chain_gradients > 0:
            gradients += chain_gradients
            gradient_seconds += float(seconds)
        else:
            densities += by_name["warmup_log_density_evaluations"]
            densities += by_name["sampling_log_density_evaluations"]
            density_seconds += float(seconds)
    if uncounted:
        gradients += leapfrog_total(runtime, [key for key, _ in uncounted])
        # Only chains with stored leapfrog steps made gradient evaluations.
        gradient_seconds += sum(
            s for key, s in uncounted if _leapfrog_by_chain.get(key) is not None
        )
    return (
        gradients / gradient_seconds if gradient_seconds > 0 else 0.0,
        densities / density_seconds if density_seconds > 0 else 0.0,
    )


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


def live_workers(runtime: Runtime) -> int | None:
    """Workers answering a broadcast ping within the configured short timeout."""
    try:
        replies = runtime.celery.control.ping(timeout=runtime.settings.metrics_ping_timeout)
    except Exception:  # any broker failure means "unknown", reported by leaving the metric out
        return None
    return len(replies or [])


def exposition(runtime: Runtime) -> str:
    """The whole scrape body."""
    parts = []
    counts = job_counts(runtime)
    parts.append(
        _family(
            "drawyard_jobs",
            "gauge",
            "Jobs in the store by state.",
            [("drawyard_jobs", {"state": s}, n) for s, n in counts.items()],
        )
    )
    depth = queue_depth(runtime)
    if depth is not None:
        parts.append(
            _family(
                "drawyard_queue_messages",
                "gauge",
                "Task messages waiting in the broker queue.",
                [("drawyard_queue_messages", {"queue": runtime.settings.queue}, depth)],
            )
        )
    durations = chain_durations(runtime)
    cumulative = np.searchsorted(np.sort(durations), DURATION_BUCKETS, side="right")
    buckets = [
        ("drawyard_chain_duration_seconds_bucket", {"le": repr(b)}, int(c))
        for b, c in zip(DURATION_BUCKETS, cumulative, strict=True)
    ]
    buckets.append(("drawyard_chain_duration_seconds_bucket", {"le": "+Inf"}, durations.size))
    buckets.append(("drawyard_chain_duration_seconds_sum", {}, float(durations.sum())))
    buckets.append(("drawyard_chain_duration_seconds_count", {}, durations.size))
    parts.append(
        _family(
            "drawyard_chain_duration_seconds",
            "histogram",
            "Wall time of succeeded chains, warm-up included.",
            buckets,
        )
    )
    gradient_rate, density_rate = evaluation_rates(runtime)
    parts.append(
        _family(
            "drawyard_gradient_evaluations_per_second",
            "gauge",
            "Evaluations of the log density with its gradient in all phases (initialisation, "
            "step-size search, warm-up, sampling) per second of wall time, over succeeded chains "
            "that evaluate gradients (NUTS, static HMC). Chains stored before the counts existed "
            "contribute their sampling-phase leapfrog steps, a lower bound.",
            [("drawyard_gradient_evaluations_per_second", {}, gradient_rate)],
        )
    )
    parts.append(
        _family(
            "drawyard_log_density_evaluations_per_second",
            "gauge",
            "Evaluations of the log density alone (no gradient) in all phases per second of wall "
            "time, over succeeded chains that evaluate no gradient (random-walk Metropolis). "
            "Chains stored before the counts existed are left out.",
            [("drawyard_log_density_evaluations_per_second", {}, density_rate)],
        )
    )
    workers = live_workers(runtime)
    if workers is not None:
        parts.append(
            _family(
                "drawyard_workers_live",
                "gauge",
                "Workers that answered a ping within the timeout.",
                [("drawyard_workers_live", {}, workers)],
            )
        )
    return "".join(parts)
