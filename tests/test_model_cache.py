"""Compiled models kept between chains in a worker process (worker/model_cache.py).

What is checked: a chain run on a model kept from an earlier chain gives bitwise the draws (and
generated quantities) of a chain run on a freshly compiled model, the model its own reference
(worker.runner's in-process path compiles afresh per call of compile_body); each key is compiled
once while it stays within the bound; a model lent out is never lent twice at once; the byte bound
and the count bound evict the least recently used model first.
"""

from __future__ import annotations

import numpy as np

from tests.test_runner import normal_mean_body
from worker import runner
from worker.model_cache import CompiledModels


def _body(seed: int = 11) -> dict:
    body = normal_mean_body(chains=2, warmup_iterations=60, draws=40, seed=seed)
    resolved = runner.resolve_sampler(body["sampler"])
    return {**body, "sampler": {k: v for k, v in resolved.items() if v is not None}}


def test_a_kept_model_gives_the_draws_of_a_fresh_one():
    body = _body()
    models = CompiledModels(64 * 2**20)
    kept = []
    for chain_index in (0, 1, 0):
        model = models.borrow("key", lambda: runner.compile_body(body))
        kept.append(model)
        cached = runner.start_chain(body, chain_index, model).run()
        models.give_back("key", model)
        fresh = runner.start_chain(body, chain_index).run()
        assert np.array_equal(cached.values, fresh.values)
        for name, column in fresh.stats.items():
            assert np.array_equal(cached.stats[name], column), name
    assert models.compilations == 1
    assert kept[0] is kept[1] is kept[2]


def test_a_model_is_lent_to_one_borrower_at_a_time():
    models = CompiledModels(64 * 2**20)
    body = _body()
    first = models.borrow("key", lambda: runner.compile_body(body))
    second = models.borrow("key", lambda: runner.compile_body(body))
    assert second is not first and models.compilations == 2
    models.give_back("key", second)  # the extra one is not kept
    models.give_back("key", first)
    assert models.borrow("key", lambda: runner.compile_body(body)) is first


class Sized:
    def __init__(self, size: int):
        self.size = size

    def memory_bytes(self) -> int:
        return self.size


def test_bounds_evict_the_least_recently_used():
    models = CompiledModels(max_bytes=100, max_models=3)
    made = {}
    for key, size in (("a", 40), ("b", 40), ("c", 10)):
        made[key] = models.borrow(key, lambda size=size: Sized(size))
        models.give_back(key, made[key])
    assert len(models) == 3 and models.kept_bytes() == 90
    models.give_back("a", models.borrow("a", lambda: Sized(40)))  # a is now the most recent
    models.give_back("d", models.borrow("d", lambda: Sized(30)))  # 120 bytes: b goes
    assert models.kept_bytes() == 80 and len(models) == 3
    assert models.borrow("a", lambda: Sized(40)) is made["a"]
    assert models.borrow("b", lambda: Sized(40)) is not made["b"]
    too_big = models.borrow("e", lambda: Sized(1000))
    models.give_back("e", too_big)
    assert models.borrow("e", lambda: Sized(1000)) is not too_big


def test_memory_bytes_counts_the_data():
    from tests.bench.bench_modeling import logistic_regression

    spec, data, _ = logistic_regression(rows=2000, covariates=5)
    model = runner.compile_body({"model": spec, "data": data})
    design = 2000 * 5 * 8
    assert design <= model.memory_bytes() < 20 * design
