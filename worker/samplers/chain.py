"""The Chain driver: warm-up then sampling for one chain, resumable from a snapshot."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from worker.samplers import snapshot as snapshot_format
from worker.samplers.dual_averaging import DualAveraging, initial_step_size
from worker.samplers.hamiltonian import Metric, State
from worker.samplers.initialisation import initial_state
from worker.samplers.metric_adaptation import RunningCovariance, warmup_schedule
from worker.samplers.metropolis import (
    MetropolisTransition,
    RandomWalkProposal,
    default_log_scale,
    scale_gain,
)
from worker.samplers.nuts import NutsTransition
from worker.samplers.settings import SamplerSettings
from worker.samplers.static_hmc import StaticHmcTransition
from worker.samplers.target import CountedTarget, Target
from worker.samplers.warm_schedule import (
    WarmStart,
    converted,
    refreshed,
    warm_schedule,
)

STAT_TYPES: dict[str, dict[str, type]] = {
    "nuts": {
        "step_size": np.float64, "doublings": np.int64, "gradient_calls": np.int64,
        "accept_probability": np.float64, "energy": np.float64, "divergent": np.bool_,
        "log_density": np.float64,
    },
    "hmc": {
        "step_size": np.float64, "gradient_calls": np.int64, "accept_probability": np.float64,
        "energy": np.float64, "divergent": np.bool_, "log_density": np.float64,
    },
    "metropolis": {
        "accept_probability": np.float64, "log_density": np.float64, "proposal_scale": np.float64,
    },
}  # fmt: skip

PROGRESS_CALLS = 100  # progress is reported about every 1% of iterations, and at the end
LOG_SCALE_LIMIT = 50.0

ProgressCallback = Callable[[str, int, int], None]


@dataclass
class ChainOutput:
    draws: np.ndarray  # (draws so far, dimension), unconstrained, sampling phase only
    stats: dict[str, np.ndarray]
    warmup_stats: dict[str, np.ndarray]
    adapted: dict
    completed: bool
    # Calls into the model by phase ("warmup" includes initialisation and every step-size search;
    # see EvaluationCounts); None for a chain resumed from a snapshot that did not count them.
    evaluations: EvaluationCounts | None = None


@dataclass
class EvaluationCounts:
    """How often a chain evaluated the model, by phase ("warmup", "sampling").

    ``gradient`` counts evaluations of the log density with its gradient, ``log_density`` of
    the log density alone (what random-walk Metropolis makes; it makes no gradient evaluations).
    """

    gradient: dict[str, int]
    log_density: dict[str, int]

    def as_json(self) -> dict[str, dict[str, int]]:
        return {"gradient": dict(self.gradient), "log_density": dict(self.log_density)}


@dataclass(frozen=True)
class Checkpoint:
    """An incremental checkpoint: the records of iterations ``start`` to ``iteration`` (new since
    the chain's previous one) and a snapshot of the state without any records.

    ``Chain.restore(target, state, blocks)`` with every ``records`` block since the chain began,
    in order, continues exactly where the chain was; so each checkpoint costs the new records plus
    the state, not every draw so far.
    """

    start: int
    iteration: int
    records: bytes
    state: bytes


def sampling_sequence(seed: np.random.SeedSequence, child: int) -> np.random.SeedSequence:
    """Child ``child`` of ``seed``, the same one ``seed.spawn`` would make, without mutating it.

    DEVELOPERS.md: child 0 drives sampling, child 1 the per-draw outputs.
    """
    return np.random.SeedSequence(
        seed.entropy, spawn_key=(*seed.spawn_key, child), pool_size=seed.pool_size
    )


class Chain:
    """One Markov chain for a Target: initialisation, windowed warm-up, then sampling.

    All randomness comes from one Generator built from child 0 of ``seed``, and every piece of
    state that influences the future lives in attributes that ``snapshot`` writes out, so a chain
    restored at any iteration continues with exactly the draws the uninterrupted chain makes.
    """

    def __init__(
        self,
        target: Target,
        settings: SamplerSettings,
        seed: np.random.SeedSequence,
        initial_point: np.ndarray | None = None,
        warm_start: WarmStart | None = None,
    ):
        """``warm_start`` begins from an earlier chain's adapted state and final position, with
        the shorter warm-up of worker/samplers/warm_schedule.py; ``initial_point``, when given,
        wins over the earlier position."""
        if int(target.dimension) < 1:
            raise ValueError(f"the target must have dimension >= 1, got {target.dimension}")
        self._setup(target, settings)
        if warm_start is not None:
            self._check_warm_start(warm_start)
            self._warm(converted(warm_start.covariance, settings.preconditioning, self.dimension))
            if initial_point is None:
                initial_point = warm_start.position
        self.rng = np.random.default_rng(sampling_sequence(seed, 0))
        self.iteration = 0
        self.divergences = {"warmup": 0, "sampling": 0}
        self.estimator = RunningCovariance(self.dimension, settings.preconditioning == "full")
        target = self.target  # the counting wrapper from _setup: initialisation is counted too
        with np.errstate(all="ignore"):
            self.state = initial_state(
                target,
                settings.initialisation,
                settings.start_spread,
                self.rng,
                initial_point,
                needs_gradient=not self._metropolis,
            )
            if self._metropolis:
                if warm_start is not None:
                    assert warm_start.proposal_scale is not None  # _check_warm_start
                    self.proposal = RandomWalkProposal(
                        settings.preconditioning,
                        self.warm_covariance,
                        math.log(warm_start.proposal_scale),
                    )
                else:
                    self.proposal = RandomWalkProposal.initial(
                        settings.preconditioning, self.dimension
                    )
                self.scale_updates = 0
                self.average_sum = 0.0
                self.average_count = 0
            elif warm_start is not None:
                assert warm_start.step_size is not None  # _check_warm_start
                self.metric = Metric(settings.preconditioning, self.warm_covariance)
                self.step_size = float(warm_start.step_size)
                if warm_start.metric != settings.preconditioning:
                    # Another kind of metric changes the units of the step size: search from the
                    # earlier one as a cold start searches from 1.
                    self.step_size = initial_step_size(
                        target, self.metric, self.state, self.step_size, self.rng
                    )
                # mu = log(10 eps) as in a cold start: shrinking toward the earlier step size
                # itself gave smaller steps and less ESS per gradient in tests/bench.
                self.dual = DualAveraging.start(self.step_size, self.goal)
            else:
                self.metric = Metric.identity(settings.preconditioning, self.dimension)
                self.step_size = initial_step_size(target, self.metric, self.state, 1.0, self.rng)
                self.dual = DualAveraging.start(self.step_size, self.goal)
        # Initialisation, the first step-size search and any evaluations made through a
        # CountedTarget before the chain was built (the runner's warm-start checks) are warm-up.
        self.evaluations = EvaluationCounts(
            gradient={"warmup": self.target.gradient_evaluations, "sampling": 0},
            log_density={"warmup": self.target.log_density_evaluations, "sampling": 0},
        )
        self._counts_known = True
        self._allocate()
        self._records_given = 0

    def _setup(self, target: Target, settings: SamplerSettings) -> None:
        # A CountedTarget passed in keeps the counts it already has (they are warm-up).
        self.target = target if isinstance(target, CountedTarget) else CountedTarget(target)
        self.settings = settings
        self.dimension = int(target.dimension)
        self.total_iterations = settings.warmup_iterations + settings.draws
        self.goal = settings.acceptance_goal(self.dimension)
        self.schedule = warmup_schedule(settings.warmup_iterations)
        self._metropolis = settings.method == "metropolis"
        self._types = STAT_TYPES[settings.method]
        # No preconditioning has nothing to estimate, so its warm-up is step size (or scale) only.
        adapting = settings.preconditioning != "none"
        self._windows = self.schedule.window_ends if adapting else frozenset()
        self.warm_covariance: np.ndarray | None = None

    def _check_warm_start(self, warm: WarmStart) -> None:
        # The runner reports these as problems with pointers first; this guards direct callers.
        needed = "proposal_scale" if self._metropolis else "step_size"
        if getattr(warm, needed) is None:
            raise ValueError(f"a {self.settings.method} chain's warm start needs a {needed}")
        d = self.dimension
        if np.shape(warm.covariance) not in ((d,), (d, d)):
            raise ValueError(
                f"the warm start's metric has shape {np.shape(warm.covariance)}; the target has "
                f"dimension {d}"
            )
        if warm.position is not None and np.shape(warm.position) != (d,):
            raise ValueError(
                f"the warm start's position has shape {np.shape(warm.position)}; expected ({d},)"
            )

    def _warm(self, covariance: np.ndarray) -> None:
        """Switch to the warm-start schedule, keeping the earlier metric to refresh toward."""
        self.warm_covariance = np.array(covariance, dtype=np.float64)
        self.schedule = warm_schedule(self.settings.warmup_iterations)
        adapting = self.settings.preconditioning != "none"
        self._windows = self.schedule.window_ends if adapting else frozenset()

    def _allocate(self) -> None:
        s = self.settings
        self.draws = np.zeros((s.draws, self.dimension))
        self.stats = {k: np.zeros(s.draws, dtype=t) for k, t in self._types.items()}
        self.warmup_stats = {
            k: np.zeros(s.warmup_iterations, dtype=t) for k, t in self._types.items()
        }

    # ---- running -------------------------------------------------------------------------------

    def run(
        self,
        progress: ProgressCallback | None = None,
        should_stop: Callable[[], bool] | None = None,
        checkpoint: Callable[[bytes], None] | Callable[[Checkpoint], None] | None = None,
        checkpoint_every: int = 100,
        incremental: bool = False,
    ) -> ChainOutput:
        """Run to the end, or until ``should_stop()`` is true (polled before every iteration).

        ``progress(phase, iteration, divergences)`` gets the phase of the iteration just finished
        ("warmup" or "sampling"), the number of iterations finished counting warm-up, and the
        divergences so far in that phase; it is called about every 1% of iterations and after the
        last. ``checkpoint(snapshot_bytes)`` is called after every ``checkpoint_every`` iterations;
        with ``incremental`` it gets ``incremental_checkpoint()`` instead (the new records and the
        state apart), so the cost of each checkpoint does not grow with the chain.
        """
        if checkpoint_every < 1:
            raise ValueError("checkpoint_every must be at least 1")
        stride = max(1, math.ceil(self.total_iterations / PROGRESS_CALLS))
        while self.iteration < self.total_iterations:
            if should_stop is not None and should_stop():
                break
            self.step()
            done = self.iteration
            # Also at the last warm-up iteration, so warm-up's final divergence count is reported.
            boundary = done in (self.settings.warmup_iterations, self.total_iterations)
            if progress is not None and (done % stride == 0 or boundary):
                phase = "warmup" if done <= self.settings.warmup_iterations else "sampling"
                progress(phase, done, self.divergences[phase])
            if checkpoint is not None and done % checkpoint_every == 0:
                if done < self.total_iterations:
                    checkpoint(self.incremental_checkpoint() if incremental else self.snapshot())
        return self.output()

    def step(self) -> None:
        """One iteration: a transition, its bookkeeping, and (in warm-up) adaptation."""
        i = self.iteration
        warmup = self.settings.warmup_iterations
        counted = self.target
        gradient_mark = counted.gradient_evaluations
        density_mark = counted.log_density_evaluations
        # Overflow and invalid operations are expected on bad trajectories and are handled as
        # divergences; numpy's warnings about them are noise.
        with np.errstate(all="ignore"):
            self.state, stats = self._transition()(self.state, self.rng)
            if i < warmup and not self._metropolis:
                self._adapt_hamiltonian(i, stats["accept_probability"])
        if i < warmup:
            self._record(self.warmup_stats, i, stats)
            if stats.get("divergent"):
                self.divergences["warmup"] += 1
            if self._metropolis:
                self._adapt_proposal(i, stats["accept_probability"])
        else:
            j = i - warmup
            self.draws[j] = self.state.position
            self._record(self.stats, j, stats)
            if stats.get("divergent"):
                self.divergences["sampling"] += 1
        # Adaptation's step-size searches fall in warm-up iterations and count there.
        phase = "warmup" if i < warmup else "sampling"
        self.evaluations.gradient[phase] += counted.gradient_evaluations - gradient_mark
        self.evaluations.log_density[phase] += counted.log_density_evaluations - density_mark
        self.iteration = i + 1

    def _transition(self) -> Callable[[State, np.random.Generator], tuple[State, dict]]:
        s = self.settings
        if s.method == "nuts":
            return NutsTransition(
                self.target,
                self.metric,
                self.step_size,
                s.maximum_tree_depth,
                s.divergence_threshold,
            )
        if s.method == "hmc":
            return StaticHmcTransition(
                self.target, self.metric, self.step_size, s.integration_time, s.jitter,
                2**s.maximum_tree_depth, s.divergence_threshold,
            )  # fmt: skip
        return MetropolisTransition(self.target, self.proposal)

    def _record(self, table: dict[str, np.ndarray], row: int, stats: dict[str, float]) -> None:
        for name, column in table.items():
            column[row] = stats[name]

    def _adapt_hamiltonian(self, i: int, acceptance: float) -> None:
        self.step_size = self.dual.update(acceptance)
        if self._windows and self.schedule.in_window(i):
            self.estimator.add(self.state.position)
        if i + 1 in self._windows and self.warm_covariance is not None:
            estimate = refreshed(self.warm_covariance, self.estimator)
            self.estimator.reset()
            if estimate is not None:
                self.metric = Metric(self.settings.preconditioning, estimate)
            # The refreshed metric is close to the one the step size was adapted to, so the
            # averaged step size so far is a better start than a fresh one-step search.
            self.step_size = self.dual.final_step_size()
            self.dual = DualAveraging.start(self.step_size, self.goal)
        elif i + 1 in self._windows:
            estimate = self.estimator.regularised()
            self.estimator.reset()
            if estimate is not None:
                self.metric = Metric(self.settings.preconditioning, estimate)
            # A new metric changes the scale of every direction: search a fresh step size and
            # restart dual averaging around it (Hoffman & Gelman 2014, section 3.2).
            self.step_size = initial_step_size(
                self.target, self.metric, self.state, self.step_size, self.rng
            )
            self.dual = DualAveraging.start(self.step_size, self.goal)
        if i + 1 == self.settings.warmup_iterations:
            self.step_size = self.dual.final_step_size()

    def _adapt_proposal(self, i: int, acceptance: float) -> None:
        proposal = self.proposal
        self.scale_updates += 1
        proposal.log_scale += scale_gain(self.scale_updates) * (acceptance - self.goal)
        proposal.log_scale = min(max(proposal.log_scale, -LOG_SCALE_LIMIT), LOG_SCALE_LIMIT)
        if self._windows and self.schedule.in_window(i):
            self.estimator.add(self.state.position)
        if i + 1 in self._windows and self.warm_covariance is not None:
            estimate = refreshed(self.warm_covariance, self.estimator)
            self.estimator.reset()
            if estimate is not None:
                # A refresh changes the shape a little: the adapted scale still fits it.
                self.proposal = RandomWalkProposal(
                    self.settings.preconditioning, estimate, self.proposal.log_scale
                )
        elif i + 1 in self._windows:
            estimate = self.estimator.regularised()
            self.estimator.reset()
            if estimate is not None:
                # With the covariance learned, the optimal scale is again about 2.38/sqrt(d).
                self.proposal = RandomWalkProposal(
                    self.settings.preconditioning, estimate, default_log_scale(self.dimension)
                )
                self.scale_updates = 0
        warmup = self.settings.warmup_iterations
        # Polyak-Ruppert average over the second half of the stretch with the final proposal
        # shape, leaving out the restart's first, large-gain iterations.
        settled = self.schedule.final_start if self._windows else 0
        average_from = (settled + warmup) // 2
        if i >= average_from:
            self.average_sum += self.proposal.log_scale
            self.average_count += 1
        if i + 1 == warmup and self.average_count:
            self.proposal.log_scale = self.average_sum / self.average_count

    # ---- results -------------------------------------------------------------------------------

    def output(self) -> ChainOutput:
        warmup = self.settings.warmup_iterations
        done_warmup = min(self.iteration, warmup)
        done_draws = max(0, self.iteration - warmup)
        # Views, not copies (a long chain's draws are its largest array): rows already written are
        # never written again, since the iteration only moves forward.
        return ChainOutput(
            draws=self.draws[:done_draws],
            stats={k: v[:done_draws] for k, v in self.stats.items()},
            warmup_stats={k: v[:done_warmup] for k, v in self.warmup_stats.items()},
            adapted=self.adapted(),
            completed=self.iteration == self.total_iterations,
            evaluations=self.evaluation_counts(),
        )

    def evaluation_counts(self) -> EvaluationCounts | None:
        """A copy of the counts so far; None when a resume lost the count (see ``restore``)."""
        if not self._counts_known:
            return None
        counts = self.evaluations
        return EvaluationCounts(dict(counts.gradient), dict(counts.log_density))

    def adapted(self) -> dict:
        """The current (after warm-up: final) step size and metric, or proposal, and position, as
        JSON values; a later job can warm-start from it (worker/samplers/warm_schedule.py)."""
        position = self.state.position.tolist()
        if self._metropolis:
            return {**self.proposal.as_json(), "position": position}
        return {"step_size": self.step_size, **self.metric.as_json(), "position": position}

    # ---- snapshot / restore --------------------------------------------------------------------

    def _records(self, start: int, stop: int) -> dict[str, np.ndarray]:
        """The draws and statistics of iterations ``start`` to ``stop``, as views, by phase."""
        warmup = self.settings.warmup_iterations
        w0, w1 = min(start, warmup), min(stop, warmup)
        d0, d1 = max(0, start - warmup), max(0, stop - warmup)
        return {
            "draws": self.draws[d0:d1],
            **{f"stat_{k}": v[d0:d1] for k, v in self.stats.items()},
            **{f"warmup_stat_{k}": v[w0:w1] for k, v in self.warmup_stats.items()},
        }

    def _load_records(self, start: int, arrays: dict[str, np.ndarray]) -> int:
        """Put back records of iterations from ``start``; returns the iteration after the last."""
        warmup = self.settings.warmup_iterations
        rows = arrays["draws"].shape[0]
        warmup_rows = arrays[f"warmup_stat_{next(iter(self._types))}"].shape[0]
        stop = start + warmup_rows + rows
        # warm-up rows end by the end of warm-up; sampling rows start right after it
        if (warmup_rows and start + warmup_rows > warmup) or (
            rows and start + warmup_rows < warmup
        ):
            raise snapshot_format.SnapshotError("records that do not fit the chain's phases")
        if stop > self.total_iterations:
            raise snapshot_format.SnapshotError("records past the chain's last iteration")
        d0 = max(0, start + warmup_rows - warmup)
        self.draws[d0 : d0 + rows] = arrays["draws"]
        for k, v in self.stats.items():
            v[d0 : d0 + rows] = arrays[f"stat_{k}"]
        for k, v in self.warmup_stats.items():
            v[start : start + warmup_rows] = arrays[f"warmup_stat_{k}"]
        return stop

    def records(self, start: int) -> bytes:
        """The records of iterations ``start`` to the current one, as a block (the format of
        worker.samplers.snapshot, kind RECORDS_FORMAT)."""
        header = {"start": start, "stop": self.iteration, "dimension": self.dimension}
        return snapshot_format.encode(
            header, self._records(start, self.iteration), snapshot_format.RECORDS_FORMAT
        )

    def incremental_checkpoint(self) -> Checkpoint:
        """The records since the previous incremental checkpoint (or since the chain began or was
        restored: the caller holds the earlier ones) and the state without records."""
        start, self._records_given = self._records_given, self.iteration
        return Checkpoint(
            start, self.iteration, self.records(start), self.snapshot(records_from=self.iteration)
        )

    def snapshot(self, records_from: int = 0) -> bytes:
        """The complete state as bytes (see worker.samplers.snapshot for the format), with the
        records (draws, statistics) of iterations ``records_from`` onward: 0 gives a snapshot that
        resumes alone; a later start needs the earlier records as blocks (``restore``)."""
        if not 0 <= records_from <= self.iteration:
            raise ValueError(f"records_from {records_from} outside 0..{self.iteration}")
        header = {
            "settings": self.settings.as_dict(),
            "dimension": self.dimension,
            "iteration": self.iteration,
            "generator": self.rng.bit_generator.state,
            "log_density": self.state.log_density,
            "divergences": self.divergences,
            "estimator_count": self.estimator.count,
            "records_from": records_from,
        }
        if self._counts_known:
            header["evaluations"] = self.evaluations.as_json()
        arrays = {
            "position": self.state.position,
            "gradient": self.state.gradient,
            **self.estimator.arrays("estimator_"),
            **self._records(records_from, self.iteration),
        }
        if self.warm_covariance is not None:
            header["warm_start"] = True
            arrays["warm_covariance"] = self.warm_covariance
        if self._metropolis:
            header.update(
                log_scale=self.proposal.log_scale,
                scale_updates=self.scale_updates,
                average_sum=self.average_sum,
                average_count=self.average_count,
            )
            arrays["proposal_covariance"] = self.proposal.covariance
        else:
            header.update(step_size=self.step_size, dual_averaging=self.dual.as_dict())
            arrays["preconditioner"] = self.metric.inverse
        return snapshot_format.encode(header, arrays)

    @classmethod
    def restore(cls, target: Target, blob: bytes, blocks: Sequence[bytes] = ()) -> Chain:
        """A chain that continues exactly where the snapshotted one stopped.

        ``blocks``: the records blocks of iterations before the snapshot's ``records_from``, in
        order and without gaps (``Checkpoint.records``); none for a snapshot that holds them all.
        """
        header, arrays = snapshot_format.decode(blob)
        settings = SamplerSettings.from_dict(header["settings"])
        if int(target.dimension) != header["dimension"]:
            raise snapshot_format.SnapshotError(
                f"the snapshot is for dimension {header['dimension']}, the target has "
                f"{target.dimension}"
            )
        chain = cls.__new__(cls)
        chain._setup(target, settings)
        if header.get("warm_start"):
            chain._warm(arrays["warm_covariance"])
        chain._allocate()
        bit_generator = getattr(np.random, header["generator"]["bit_generator"])()
        bit_generator.state = header["generator"]
        chain.rng = np.random.Generator(bit_generator)
        chain.iteration = int(header["iteration"])
        chain.divergences = {k: int(v) for k, v in header["divergences"].items()}
        # A snapshot written before chains counted evaluations cannot say what was spent so far:
        # the chain keeps counting, but reports no counts rather than a short total.
        counts = header.get("evaluations")
        chain._counts_known = counts is not None
        counts = counts or {"gradient": {}, "log_density": {}}
        phases = ("warmup", "sampling")
        chain.evaluations = EvaluationCounts(
            gradient={p: int(counts["gradient"].get(p, 0)) for p in phases},
            log_density={p: int(counts["log_density"].get(p, 0)) for p in phases},
        )
        chain.state = State(
            np.array(arrays["position"]), float(header["log_density"]), np.array(arrays["gradient"])
        )
        chain.estimator = RunningCovariance(chain.dimension, settings.preconditioning == "full")
        chain.estimator.load(int(header["estimator_count"]), arrays, "estimator_")
        reached = 0
        for block in blocks:
            found, records = snapshot_format.decode(block, snapshot_format.RECORDS_FORMAT)
            if found.get("dimension") != chain.dimension or found.get("start") != reached:
                raise snapshot_format.SnapshotError(
                    f"a records block for iterations from {found.get('start')} where "
                    f"{reached} was next"
                )
            reached = chain._load_records(reached, records)
        if reached != int(header.get("records_from", 0)):
            raise snapshot_format.SnapshotError(
                f"the records end at iteration {reached}; the snapshot's start at "
                f"{header.get('records_from', 0)}"
            )
        if chain._load_records(reached, arrays) != chain.iteration:
            raise snapshot_format.SnapshotError("the records do not reach the snapshot's iteration")
        # later incremental checkpoints hand out records from here: the caller holds the rest
        chain._records_given = chain.iteration
        if chain._metropolis:
            chain.proposal = RandomWalkProposal(
                settings.preconditioning, arrays["proposal_covariance"], float(header["log_scale"])
            )
            chain.scale_updates = int(header["scale_updates"])
            chain.average_sum = float(header["average_sum"])
            chain.average_count = int(header["average_count"])
        else:
            chain.metric = Metric(settings.preconditioning, arrays["preconditioner"])
            chain.step_size = float(header["step_size"])
            chain.dual = DualAveraging(**header["dual_averaging"])
        return chain
