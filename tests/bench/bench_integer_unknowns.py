"""The change-point job (coal-mining disasters, tests/samplers/test_integer_references.py):
seconds and effective draws per second of the compound sampler, side by side in one run.

Rows: the Gibbs sweep compounded with NUTS, with static HMC and with Metropolis; and NUTS again
with the change year's conditional weighed value by value instead of in one batched pass (the
ratio is what batching saves); and the same model with the change year summed out of the
density (worker/modeling/summing.py: NUTS on the two rates alone, the year drawn per draw from
its conditional), so the two ways sit side by side. ESS is the smallest bulk-ESS over the quantities
(worker.diagnostics), so ESS/s is the rate of the slowest-mixing one.
"""

from __future__ import annotations

import time

from tests.samplers.test_integer_references import coal_body
from worker.runner import compile_body, finish_job, resolve_sampler, start_chain

CHAINS, DRAWS = 4, 1000


def measure(label: str, method: str, batched: bool = True, summed: bool = False) -> float:
    body = coal_body(chains=CHAINS, draws=DRAWS, seed=7)
    body["sampler"]["method"] = method
    if summed:
        body["model"]["unknowns"]["change"]["summed_out"] = True
    body["sampler"] = {k: v for k, v in resolve_sampler(body["sampler"]).items() if v is not None}
    started = time.perf_counter()
    model = compile_body(body)
    for conditional in model.conditionals:
        conditional.batched = batched
    results = [start_chain(body, i, model).run() for i in range(CHAINS)]
    summary = finish_job(body, results)["summary"]
    seconds = time.perf_counter() - started
    ess = min(q["bulk_ess"] for q in summary)
    print(f"{label:<34} {seconds:8.2f} s  min bulk-ESS {ess:8.0f}  ESS/s {ess / seconds:8.1f}",
          flush=True)
    return ess / seconds


def main() -> None:
    print(f"change-point job, {CHAINS} chains x {DRAWS} draws (+1000 warm-up) each")
    nuts = measure("gibbs + nuts", "nuts")
    hmc = measure("gibbs + static hmc", "hmc")
    metropolis = measure("gibbs + metropolis", "metropolis")
    slow = measure("gibbs (value by value) + nuts", "nuts", batched=False)
    summed = measure("summed out + nuts", "nuts", summed=True)
    print(f"ESS/s ratios: nuts / hmc {nuts / hmc:.2f}, nuts / metropolis {nuts / metropolis:.2f}, "
          f"batched / value-by-value conditional {nuts / slow:.2f}, "
          f"summed out / gibbs + nuts {summed / nuts:.2f}")


if __name__ == "__main__":
    main()
