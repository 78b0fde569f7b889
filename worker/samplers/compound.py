"""Chains for models with integer unknowns: a Gibbs sweep, then one continuous step.

Every iteration first draws each integer unknown from its full conditional (worker/samplers/
gibbs.py), then moves the continuous unknowns by one NUTS, static HMC or Metropolis transition
with the integers held at their new values. Each half leaves the joint posterior invariant, so
their composition does too (updates of blocks in turn, each from its conditional, as in Gelfand
& Smith 1990). Warm-up adapts only the continuous half: the Gibbs half has nothing to tune.

A chain's point is the continuous coordinates u followed by the integer unknowns' values (as
CompiledModel lays it out); its draws are whole points. The Gibbs updates draw from child 2 of
the chain's seed sequence (child 0 drives the continuous transitions, child 1 the per-draw
outputs), so the continuous stream is the one a chain without integers would use, and the
generator's state travels in the snapshot: a resumed chain continues bit for bit.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import numpy as np

from worker.samplers import snapshot as snapshot_format
from worker.samplers.chain import Chain, ChainOutput, EvaluationCounts, sampling_sequence
from worker.samplers.gibbs import GibbsSweep
from worker.samplers.hamiltonian import State
from worker.samplers.initialisation import InitialisationError
from worker.samplers.settings import SamplerSettings
from worker.samplers.warm_schedule import WarmStart

GIBBS_CHILD = 2
# Per-draw statistic: how many integer values the iteration's Gibbs sweep changed.
CHANGES = "discrete_changes"
# A chain of integers alone draws its starting values uniformly until the density is finite; we
# chose 100 tries, as many as a model with a tiny region of positive probability deserves before
# the user is asked for initial values.
START_TRIES = 100


def _generator(state: dict) -> np.random.Generator:
    bit_generator = getattr(np.random, state["bit_generator"])()
    bit_generator.state = state
    return np.random.Generator(bit_generator)


def uniform_integers(model: Any, rng: np.random.Generator) -> np.ndarray:
    """Starting values for the integer unknowns: each element uniform over its support."""
    values = np.empty(model.discrete_size)
    offset = model.dimension
    for conditional in model.conditionals:
        b = conditional.block
        values[b.start - offset:b.stop - offset] = rng.integers(b.lower, b.upper + 1, b.size)
    return values


class HeldIntegers:
    """The continuous unknowns' target, with the integer unknowns held at ``point``'s values."""

    def __init__(self, model: Any, point: np.ndarray):
        self.model = model
        self.point = point
        self.dimension = int(model.dimension)

    def log_density(self, u: np.ndarray) -> float:
        self.point[:self.dimension] = u
        return self.model.log_density(self.point)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        self.point[:self.dimension] = u
        return self.model.log_density_and_gradient(self.point)


class CompoundChain(Chain):
    """A Chain whose every iteration begins with a Gibbs sweep over the integer unknowns."""

    def __init__(self, model: Any, settings: SamplerSettings, seed: np.random.SeedSequence,
                 initial_point: np.ndarray | None = None, warm_start: WarmStart | None = None):
        """``initial_point`` is a whole point (continuous then integer values) or None."""
        self.gibbs_rng = np.random.default_rng(sampling_sequence(seed, GIBBS_CHILD))
        point = np.zeros(model.point_size)
        if initial_point is not None:
            point[:] = initial_point
        else:
            point[model.dimension:] = uniform_integers(model, self.gibbs_rng)
        continuous = None if initial_point is None else point[:model.dimension].copy()
        super().__init__(HeldIntegers(model, point), settings, seed, continuous, warm_start)

    def _setup(self, target: Any, settings: SamplerSettings) -> None:
        # the target handed in, before Chain wraps it to count evaluations
        self.held = target
        self.model = target.model
        self.gibbs = GibbsSweep(self.model.conditionals)
        super()._setup(target, settings)
        self._types = {**self._types, CHANGES: np.int64}

    def _allocate(self) -> None:
        super()._allocate()
        self.integer_draws = np.zeros((self.settings.draws, self.model.discrete_size))

    def _transition(self):
        continuous = super()._transition()

        def compound(state: State, rng: np.random.Generator) -> tuple[State, dict]:
            point = self.held.point
            point[:self.dimension] = state.position
            changed = self.gibbs.sweep(point, self.gibbs_rng)
            if changed:
                state = self._refreshed(state)
            state, stats = continuous(state, rng)
            stats[CHANGES] = changed
            return state, stats
        return compound

    def _refreshed(self, state: State) -> State:
        """The state's log density (and gradient) under the integers' new values."""
        if self._metropolis:
            return State(state.position, self.target.log_density(state.position), state.gradient)
        return State(state.position, *self.target.log_density_and_gradient(state.position))

    def step(self) -> None:
        i = self.iteration
        super().step()
        warmup = self.settings.warmup_iterations
        if i >= warmup:
            self.integer_draws[i - warmup] = self.held.point[self.dimension:]

    def output(self) -> ChainOutput:
        output = super().output()
        done = output.draws.shape[0]
        points = np.hstack([output.draws, self.integer_draws[:done]])
        return dataclasses.replace(output, draws=points)

    def _records(self, start: int, stop: int) -> dict[str, np.ndarray]:
        # the integer values of each sampling draw travel with its continuous coordinates
        records = super()._records(start, stop)
        warmup = self.settings.warmup_iterations
        records["integer_draws"] = self.integer_draws[max(0, start - warmup):max(0, stop - warmup)]
        return records

    def _load_records(self, start: int, arrays: dict[str, np.ndarray]) -> int:
        stop = super()._load_records(start, arrays)
        warmup = self.settings.warmup_iterations
        rows = arrays["integer_draws"].shape[0]
        first = max(0, stop - rows - warmup)
        self.integer_draws[first:first + rows] = arrays["integer_draws"]
        return stop

    def snapshot(self, records_from: int = 0) -> bytes:
        header, arrays = snapshot_format.decode(super().snapshot(records_from))
        header["integers"] = {"generator": self.gibbs_rng.bit_generator.state}
        arrays["integer_point"] = self.held.point[self.dimension:].copy()
        return snapshot_format.encode(header, arrays)

    @classmethod
    def restore(cls, model: Any, blob: bytes, blocks: Sequence[bytes] = ()) -> CompoundChain:
        """The chain that continues exactly where the snapshotted one stopped (``blocks`` as
        for Chain.restore)."""
        header, arrays = snapshot_format.decode(blob)
        if "integers" not in header or "integer_point" not in arrays:
            raise snapshot_format.SnapshotError("the snapshot holds no integer unknowns' state")
        if arrays["integer_point"].shape != (model.discrete_size,):
            raise snapshot_format.SnapshotError(
                f"the snapshot holds {arrays['integer_point'].size} integer values; the model "
                f"has {model.discrete_size}")
        point = np.zeros(model.point_size)
        point[model.dimension:] = arrays["integer_point"]
        point[:model.dimension] = arrays["position"]
        chain = super().restore(HeldIntegers(model, point), blob, blocks)
        assert isinstance(chain, CompoundChain)
        chain.gibbs_rng = _generator(header["integers"]["generator"])
        return chain


class GibbsChain(Chain):
    """A chain for a model whose unknowns are all integers: Gibbs sweeps alone.

    Same interface as Chain; warm-up iterations are discarded draws, with nothing to adapt.
    """

    def __init__(self, model: Any, settings: SamplerSettings, seed: np.random.SeedSequence,
                 initial_point: np.ndarray | None = None):
        self._setup_gibbs(model, settings)
        self.gibbs_rng = np.random.default_rng(sampling_sequence(seed, GIBBS_CHILD))
        self.iteration = 0
        self.divergences = {"warmup": 0, "sampling": 0}
        self.evaluations = EvaluationCounts({"warmup": 0, "sampling": 0},
                                            {"warmup": 0, "sampling": 0})
        self._counts_known = True
        with np.errstate(all="ignore"):
            self.point = self._start(initial_point)
        self._allocate()
        self._records_given = 0

    def _setup_gibbs(self, model: Any, settings: SamplerSettings) -> None:
        self.model = model
        self.settings = settings
        self.gibbs = GibbsSweep(model.conditionals)
        self.dimension = int(model.discrete_size)  # the width of a draw
        self.total_iterations = settings.warmup_iterations + settings.draws
        self._types = {CHANGES: np.int64, "log_density": np.float64}

    def _start(self, given: np.ndarray | None) -> np.ndarray:
        tries = [given] if given is not None else [None] * START_TRIES
        for candidate in tries:
            point = (np.array(candidate, dtype=float) if candidate is not None
                     else uniform_integers(self.model, self.gibbs_rng))
            self.evaluations.log_density["warmup"] += 1
            if np.isfinite(self.model.log_density(point)):
                return point
        where = "at the given initial values" if given is not None else (
            f"at any of {START_TRIES} starting values drawn uniformly over the bounds")
        raise InitialisationError(f"the log density is not finite {where}")

    def step(self) -> None:
        i = self.iteration
        warmup = self.settings.warmup_iterations
        with np.errstate(all="ignore"):
            changed = self.gibbs.sweep(self.point, self.gibbs_rng)
            log_density = self.model.log_density(self.point)
        stats = {CHANGES: changed, "log_density": log_density}
        phase = "warmup" if i < warmup else "sampling"
        if i < warmup:
            self._record(self.warmup_stats, i, stats)
        else:
            self.draws[i - warmup] = self.point
            self._record(self.stats, i - warmup, stats)
        self.evaluations.log_density[phase] += 1
        self.iteration = i + 1

    def adapted(self) -> dict:
        """Nothing is adapted; the final values for the record."""
        return {"position": [], "integers": self.point.tolist()}

    def snapshot(self, records_from: int = 0) -> bytes:
        """The state, with the records of iterations ``records_from`` onward (as Chain's)."""
        header = {
            "settings": self.settings.as_dict(),
            "dimension": 0,
            "iteration": self.iteration,
            "integers": {"generator": self.gibbs_rng.bit_generator.state},
            "evaluations": self.evaluations.as_json(),
            "records_from": records_from,
        }
        arrays = {"integer_point": self.point, **self._records(records_from, self.iteration)}
        return snapshot_format.encode(header, arrays)

    @classmethod
    def restore(cls, model: Any, blob: bytes, blocks: Sequence[bytes] = ()) -> GibbsChain:
        header, arrays = snapshot_format.decode(blob)
        if header.get("dimension") != 0 or "integers" not in header:
            raise snapshot_format.SnapshotError("not a snapshot of a chain of integers alone")
        if arrays["integer_point"].shape != (model.discrete_size,):
            raise snapshot_format.SnapshotError(
                f"the snapshot holds {arrays['integer_point'].size} integer values; the model "
                f"has {model.discrete_size}")
        chain = cls.__new__(cls)
        chain._setup_gibbs(model, SamplerSettings.from_dict(header["settings"]))
        chain._allocate()
        chain.gibbs_rng = _generator(header["integers"]["generator"])
        chain.iteration = int(header["iteration"])
        chain.divergences = {"warmup": 0, "sampling": 0}
        counts = header["evaluations"]
        chain.evaluations = EvaluationCounts(dict(counts["gradient"]), dict(counts["log_density"]))
        chain._counts_known = True
        chain.point = np.array(arrays["integer_point"], dtype=float)
        reached = 0
        for block in blocks:
            found, records = snapshot_format.decode(block, snapshot_format.RECORDS_FORMAT)
            if found.get("start") != reached:
                raise snapshot_format.SnapshotError(
                    f"a records block for iterations from {found.get('start')} where "
                    f"{reached} was next")
            reached = chain._load_records(reached, records)
        if reached != int(header.get("records_from", 0)) or \
                chain._load_records(reached, arrays) != chain.iteration:
            raise snapshot_format.SnapshotError("the records do not reach the snapshot's iteration")
        chain._records_given = chain.iteration
        return chain


def integer_chain(model: Any, settings: SamplerSettings, seed: np.random.SeedSequence,
                  initial_point: np.ndarray | None = None) -> Chain:
    """The chain for a model with integer unknowns: compound, or Gibbs alone without any
    continuous unknown."""
    if model.dimension == 0:
        return GibbsChain(model, settings, seed, initial_point)
    return CompoundChain(model, settings, seed, initial_point)


def restore_integer_chain(model: Any, blob: bytes, blocks: Sequence[bytes] = ()) -> Chain:
    """``integer_chain``'s chain continued from its snapshot (and records blocks)."""
    if model.dimension == 0:
        return GibbsChain.restore(model, blob, blocks)
    return CompoundChain.restore(model, blob, blocks)
