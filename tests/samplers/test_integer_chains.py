"""Chains with integer unknowns: reproducible, resumable bit for bit, and Gibbs alone correct.

References: the uninterrupted chain itself for resumes (a resumed chain must give exactly its
draws); for the model with integer unknowns only, the exact posterior by summing over the
support with scipy.stats.binom (Geman & Geman 1984: a Gibbs update of a lone unknown is an exact
draw from its posterior, so the draws are independent).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import logsumexp

from tests.modeling.test_integer_unknowns import change_point, mixture
from tests.samplers.batch_means import TOLERANCE_MCSE, batch_means_se
from tests.samplers.quantile_checks import failures, power_shortfall, sd_check
from worker.runner import resolve_sampler, resume_chain, run_in_process, start_chain
from worker.samplers.compound import CHANGES, CompoundChain, GibbsChain


def job(spec: dict, data: dict, **sampler) -> dict:
    settings = {"seed": 11, "chains": 2, "warmup_iterations": 150, "draws": 200, **sampler}
    resolved = resolve_sampler(settings)
    return {"model": spec, "data": data,
            "sampler": {k: v for k, v in resolved.items() if v is not None}}


def resumed_from_checkpoints(body: dict, chain: int, stop_after: int, incremental: bool):
    """Run until ``stop_after`` checkpoints (every 70 iterations) exist, then resume from the
    last: a whole snapshot, or an incremental one's state with every records block before it."""
    saved: list = []
    start_chain(body, chain).run(checkpoint=saved.append, checkpoint_every=70,
                                 should_stop=lambda: len(saved) >= stop_after,
                                 incremental=incremental)
    if not incremental:
        return resume_chain(body, chain, saved[-1]).run()
    return resume_chain(body, chain, saved[-1].state,
                        blocks=[c.records for c in saved]).run()


@pytest.mark.parametrize("incremental", [False, True])
@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_a_resumed_compound_chain_gives_the_uninterrupted_draws(method: str, incremental: bool):
    body = job(*mixture(), method=method)
    whole = start_chain(body, 1).run()
    assert isinstance(start_chain(body, 1).chain, CompoundChain)
    for stop_after in (1, 3):  # one checkpoint in warm-up, one in sampling (every 70)
        resumed = resumed_from_checkpoints(body, 1, stop_after, incremental)
        assert np.array_equal(resumed.values, whole.values)
        for name, column in whole.stats.items():
            assert np.array_equal(resumed.stats[name], column), name
    assert CHANGES in whole.stats and whole.stats[CHANGES].dtype == np.int64
    assert whole.stats[CHANGES].sum() > 0


def test_the_same_seed_gives_the_same_job_and_another_seed_another():
    spec, data = change_point()
    first = run_in_process(job(spec, data))
    again = run_in_process(job(spec, data))
    other = run_in_process(job(spec, data, seed=12))
    assert np.array_equal(first["draws"], again["draws"])
    assert not np.array_equal(first["draws"], other["draws"])
    change = first["draws"][:, :, first["names"].index("change")]
    assert np.all((change == np.round(change)) & (change >= 2) & (change <= 10))
    # the summary copes with a column of whole numbers with many ties
    record = next(q for q in first["summary"] if q["name"] == "change")
    assert np.isfinite(record["rhat"]) and record["bulk_ess"] > 0


# ---- integer unknowns only --------------------------------------------------------------------

CATCHES = [14, 11, 17, 12, 15, 9]  # invented counts, each binomial(N, 0.3) of an unknown N
CATCH_PROBABILITY = 0.3


def population() -> tuple[dict, dict]:
    spec = {
        "likelihood": [{"name": "catches", "observed": "y", "distribution": "binomial",
                        "arguments": {"trials": "N", "probability": CATCH_PROBABILITY}}],
        "inputs": {"n": {"type": "integer"}, "y": {"type": "integer", "shape": ["n"]}},
        "unknowns": {"N": {"type": "integer", "lower": 1, "upper": 150, "flat_prior": True}},
    }
    return spec, {"n": len(CATCHES), "y": CATCHES}


@pytest.mark.slow
def test_gibbs_alone_draws_the_exact_posterior_of_a_population_size():
    """p(N | y) is proportional to prod binom.pmf(y_i; N, 0.3) over N = 1..150 (flat prior):
    each value's probability within 4 MCSE (values of probability >= 0.01), and the sd.

    Power: the draws are independent (a lone unknown's Gibbs update is an exact posterior draw),
    so se(sd) ~ sd sqrt((kurtosis - 1) / (4 S)) for S draws; 4 chains of 12,500 give
    se(sd) / sd ~ 0.0032 for a near-normal posterior, and a 2 % sd error is then about 6.3 se,
    above the 2.58 + 2.33 the test needs (one check, family level 0.01, power 0.99); the test
    asserts that figure on its own draws.
    """
    spec, data = population()
    result = run_in_process(job(spec, data, chains=4, warmup_iterations=10, draws=12_500))
    N = result["draws"][:, :, 0]
    values = np.arange(1, 151)
    log_post = np.array([stats.binom.logpmf(CATCHES, v, CATCH_PROBABILITY).sum()
                         for v in values])
    p = np.exp(log_post - logsumexp(log_post))
    wide = []
    for v, q in zip(values, p, strict=True):
        if q >= 0.01:
            indicator = (N == v).astype(float)
            se = batch_means_se(indicator)
            if abs(indicator.mean() - q) > TOLERANCE_MCSE * se:
                wide.append(f"N = {v}: {indicator.mean():.4f} vs {q:.4f} (se {se:.4f})")
    assert not wide, wide
    sd = float(np.sqrt(p @ values**2 - (p @ values) ** 2))
    checks = [sd_check("N", N, sd)]
    assert not failures(checks), failures(checks)
    assert power_shortfall(checks) is None, power_shortfall(checks)


@pytest.mark.parametrize("incremental", [False, True])
def test_a_gibbs_only_chain_resumes_exactly_and_reports_its_work(incremental: bool):
    body = job(*population())
    run = start_chain(body, 0)
    assert isinstance(run.chain, GibbsChain)
    whole = run.run()
    resumed = resumed_from_checkpoints(body, 0, 4, incremental)
    assert np.array_equal(resumed.values, whole.values)
    assert np.array_equal(resumed.stats[CHANGES], whole.stats[CHANGES])
    assert resumed.evaluations.log_density == whole.evaluations.log_density
    assert whole.evaluations.log_density["sampling"] == 200
    assert set(whole.stats) == {CHANGES, "log_density"}
