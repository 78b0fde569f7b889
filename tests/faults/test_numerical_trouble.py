"""Models that are numerically hopeless end with a named reason, never a crash or a hang.

Real gunicorn, Celery worker, Redis and store. The expectations are facts of the trade (common
practice): a sampler cannot start where the log density is not finite anywhere; a leapfrog step
whose energy error exceeds the divergence threshold is a divergence (Betancourt 2017, "A conceptual
introduction to Hamiltonian Monte Carlo", section 6.2, from memory), so a threshold far below any
energy error makes every transition divergent; overflow of exp() gives infinities that the
density must report as -inf, not raise (DEVELOPERS.md, compiled model contract).
"""

from __future__ import annotations

import pytest

from tests.faults.job_watch import get_json, job_ended, submit
from tests.service.bodies import normal_mean


def _with_likelihood(arguments: dict, **sampler) -> dict:
    body = normal_mean(chains=2, warmup=100, draws=100, seed=4301, **sampler)
    body["model"]["likelihood"][0]["arguments"] = arguments
    return body


@pytest.mark.slow
def test_hopeless_models_end_with_a_named_reason(sqlite_store: str, redis_url: str, live_service):
    service = live_service(sqlite_store, redis_url, workers=2)
    never_finite = submit(
        service.base_url, _with_likelihood({"location": "mu", "scale": "mu - mu"})
    )
    overflowing = submit(
        service.base_url, _with_likelihood({"location": "exp(exp(exp(mu)))", "scale": 1})
    )
    all_divergent = submit(service.base_url, normal_mean(
        chains=2, warmup=100, draws=100, seed=4302, divergence_threshold=1e-12
    ))

    job = job_ended(never_finite, 180, service.logs)
    assert job["state"] == "failed", service.logs()
    assert "no starting point found" in job["error"] and "chain 1 failed" in job["error"]

    job = job_ended(overflowing, 180, service.logs)
    # Either outcome is a handled one; what must not happen is a crash (no reason) or a hang.
    assert job["state"] in ("succeeded", "failed"), service.logs()
    if job["state"] == "failed":
        assert job["error"], "a failed job must say why"

    job = job_ended(all_divergent, 180, service.logs)
    assert job["state"] == "succeeded", service.logs()
    diagnostics = get_json(all_divergent + "/diagnostics")
    assert diagnostics["sampler"]["divergences"] == 200
    assert diagnostics["verdict"]["passed"] is False
    assert "diverg" in str(diagnostics["verdict"]).lower()
