"""Neal's funnel (Neal 2003, Slice sampling, Annals of Statistics 31(3), section 8).

v ~ N(0, 3^2) and x_i | v ~ N(0, e^v), i = 1..9. In the centred form the curvature changes by
orders of magnitude along v, no single step size fits the neck, and NUTS must say so by flagging
divergences. In the non-centred form (x_i = e^(v/2) z_i, z_i ~ N(0, 1)) the target is a plain
Gaussian and the exact marginal of v, N(0, 3^2), must be recovered.
"""

from __future__ import annotations

import pytest
from scipy import stats

from tests.samplers.batch_means import compare_with
from tests.samplers.multichain import run_chains
from tests.samplers.targets import CentredFunnel, NonCentredFunnel
from worker.samplers import SamplerSettings


@pytest.mark.slow
def test_centred_funnel_reports_divergences() -> None:
    _, outputs = run_chains(CentredFunnel(), SamplerSettings(), seed=11)
    divergences = sum(int(out.stats["divergent"].sum()) for out in outputs)
    print(f"divergences after warm-up in the centred funnel, four chains: {divergences}")
    assert divergences > 0


@pytest.mark.parametrize("method", ["nuts", "hmc"])
def test_non_centred_funnel_recovers_marginal_of_v(method: str) -> None:
    draws, outputs = run_chains(NonCentredFunnel(), SamplerSettings(method=method), seed=12)
    failures = compare_with(draws[:, :, 0], stats.norm(0.0, 3.0), f"{method} funnel v")
    assert not failures, failures
    assert sum(int(out.stats["divergent"].sum()) for out in outputs) == 0
