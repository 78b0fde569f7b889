"""The engine's in-process interface: a submission body in; chains, a summary and a verdict out.

What the service, the worker tasks, the command line and the benchmarks call. A submission body
has the members ``model`` (the spec), ``data``, ``sampler`` (settings), ``checks`` (verdict
thresholds) and ``labels``. Everything a chain does is fixed by the body once its seed is
recorded, so a chain can run in any process, be resumed from a snapshot, and give the same draws.
"""

from __future__ import annotations

import dataclasses
import math
import secrets
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from worker.approximation.runs import (
    APPROXIMATION_METHODS,
    ApproximationRun,
    approximation_verdict,
    grid_dimension_problem,
)
from worker.diagnostics import check_thresholds, sampler_checks, summarize, verdict
from worker.diagnostics.discrete import (
    MAX_PATTERN_ELEMENTS,
    flat_members,
    pattern_table,
    value_tables,
)
from worker.diagnostics.summary import DEFAULT_INTERVAL, QuantityDraws, interval_problem
from worker.problems import InvalidSubmission, Problem, escape_token
from worker.samplers import Chain, EvaluationCounts, SamplerSettings
from worker.samplers.chain import Checkpoint, sampling_sequence
from worker.samplers.compound import integer_chain, restore_integer_chain
from worker.samplers.settings import INITIALISATIONS, METHODS, PRECONDITIONINGS
from worker.samplers.target import CountedTarget
from worker.warm_start import (
    chain_state,
    member_problems,
    missing_chains_problem,
    record_problems,
    warm_start_from,
)

__all__ = ["warm_start_from"]  # re-exported: in-process users build a warm start from a result

DEFAULT_CHAINS = 4
DEFAULT_MAX_CHAINS = 16
DEFAULT_MAX_DRAWS = 100_000
MAX_SEED = 2**63 - 1  # seeds travel through JSON and SQL as signed 64-bit integers
TREE_DEPTH_LIMIT = 30
# "notify" (a completion callback), "model_ref" (a registered model, resolved to "model" before the
# engine sees it) and "reuse" (whether an earlier identical result may be returned) belong to the
# service, which checks them; the engine ignores them. The engine checks and uses "warm_start".
TOP_LEVEL_MEMBERS = (
    "model", "data", "sampler", "summary", "checks", "labels", "notify", "model_ref", "reuse",
    "warm_start",
)
# settings of the runner itself, beside those of one chain (SamplerSettings)
JOB_SETTINGS = ("chains", "seed", "initial_values", "reparametrise")
CHAIN_SETTINGS = tuple(f.name for f in dataclasses.fields(SamplerSettings))
GENERATED_CHILD = 1  # DEVELOPERS.md: child 1 of a chain's sequence drives the per-draw outputs

ProgressCallback = Callable[[str, int, int], None]


# ---- checking a submission -------------------------------------------------------------------


def _is_integer(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _integer_problem(value: Any, low: int, high: int, what: str) -> str | None:
    if not _is_integer(value):
        return f"The {what} must be a whole number, got {value!r}."
    if not low <= value <= high:
        return f"The {what} must be between {low} and {high}, got {value}."
    return None


def _positive_problem(value: Any, what: str) -> str | None:
    if not (_is_number(value) and math.isfinite(value) and value > 0):
        return f"The {what} must be a positive finite number, got {value!r}."
    return None


def _choice_problem(value: Any, choices: tuple[str, ...], what: str) -> str | None:
    if value not in choices:
        return f"The {what} must be one of {', '.join(choices)}, got {value!r}."
    return None


def _acceptance_problem(value: Any) -> str | None:
    if value is None or (_is_number(value) and 0.0 < value < 1.0):
        return None
    return f"The target acceptance must be strictly between 0 and 1 (or null), got {value!r}."


def _flag_problem(value: Any, what: str = "jitter") -> str | None:
    return None if isinstance(value, bool) else f"The {what} must be true or false, got {value!r}."


def sampler_problems(
    sampler: Any, max_chains: int = DEFAULT_MAX_CHAINS, max_draws: int = DEFAULT_MAX_DRAWS
) -> list[Problem]:
    """Every problem with the ``sampler`` member of a submission, with pointers under /sampler."""
    if sampler is None:
        return []
    if not isinstance(sampler, dict):
        return [Problem("/sampler", "The sampler settings must be an object.")]
    checks: dict[str, Callable[[Any], str | None]] = {
        "method": lambda v: _choice_problem(v, METHODS + APPROXIMATION_METHODS, "method"),
        "warmup_iterations": lambda v: _integer_problem(v, 0, max_draws, "warm-up length"),
        "draws": lambda v: _integer_problem(v, 1, max_draws, "number of draws per chain"),
        "chains": lambda v: _integer_problem(v, 1, max_chains, "number of chains"),
        "seed": lambda v: _integer_problem(v, 0, MAX_SEED, "seed"),
        "target_acceptance": _acceptance_problem,
        "maximum_tree_depth": lambda v: _integer_problem(v, 1, TREE_DEPTH_LIMIT, "depth limit"),
        "preconditioning": lambda v: _choice_problem(v, PRECONDITIONINGS, "preconditioning"),
        "integration_time": lambda v: _positive_problem(v, "integration time"),
        "jitter": _flag_problem,
        "divergence_threshold": lambda v: _positive_problem(v, "divergence threshold"),
        "initialisation": lambda v: _choice_problem(v, INITIALISATIONS, "initialisation"),
        "start_spread": lambda v: _positive_problem(v, "start spread"),
        "initial_values": lambda v: None,  # checked against the model below
        "reparametrise": lambda v: _flag_problem(v, "setting reparametrise"),
    }  # fmt: skip
    problems = []
    for name, value in sampler.items():
        where = f"/sampler/{escape_token(name)}"
        if name not in checks:
            known = ", ".join(sorted(checks))
            problems.append(Problem(where, f"Unknown sampler setting '{name}'; known: {known}."))
            continue
        message = checks[name](value)
        if message:
            problems.append(Problem(where, message))
    problems.extend(_initial_values_shape_problems(sampler))
    return problems


def _initial_values_shape_problems(sampler: dict) -> list[Problem]:
    values = sampler.get("initial_values")
    chains = sampler.get("chains", DEFAULT_CHAINS)
    if values is None:
        if sampler.get("initialisation") == "given":
            return [
                Problem(
                    "/sampler/initial_values",
                    "Initialisation 'given' needs initial values: an object of unknown names to "
                    "values, or a list of such objects, one per chain.",
                )
            ]
        return []
    if isinstance(values, dict):
        return []
    if isinstance(values, list):
        problems = [
            Problem(
                f"/sampler/initial_values/{i}", "Each chain's initial values must be an object."
            )
            for i, item in enumerate(values)
            if not isinstance(item, dict)
        ]
        if _is_integer(chains) and len(values) != chains:
            problems.append(
                Problem(
                    "/sampler/initial_values",
                    f"There are {len(values)} sets of initial values for {chains} chains.",
                )
            )
        return problems
    return [
        Problem(
            "/sampler/initial_values",
            "The initial values must be an object of unknown names to values, or a list of such "
            "objects, one per chain.",
        )
    ]


def _sentence(text: str) -> str:
    text = text.strip()
    return text[:1].upper() + text[1:] + ("" if text.endswith(".") else ".")


def _initial_values_for(sampler: dict, chain_index: int) -> dict | None:
    values = sampler.get("initial_values")
    if values is None:
        return None
    return values[chain_index] if isinstance(values, list) else values


def _initial_value_problems(body: dict) -> list[Problem]:
    """Initial values the compiled model cannot take (unknown names, wrong shapes, bounds)."""
    sampler = body.get("sampler") or {}
    values = sampler.get("initial_values")
    if values is None:
        return []
    model = compile_body(body)
    sets = values if isinstance(values, list) else [values]
    known = set(body["model"].get("unknowns") or {})
    problems = []
    for i, item in enumerate(sets):
        where = "/sampler/initial_values" + (f"/{i}" if isinstance(values, list) else "")
        problems.extend(
            Problem(f"{where}/{escape_token(name)}", f"'{name}' is not an unknown of the model.")
            for name in item
            if name not in known
        )
        try:
            point = np.asarray(model.unconstrain(item), dtype=np.float64)
        except InvalidSubmission as error:
            # the model reports pointers relative to the mapping of values; root them here
            problems.extend(
                Problem(where + p.pointer, _sentence(p.message)) for p in error.problems
            )
            continue
        except (ValueError, KeyError, TypeError, IndexError) as error:
            problems.append(Problem(where, f"These initial values cannot be used: {error}."))
            continue
        if point.shape != (model.point_size,) or not np.isfinite(point).all():
            problems.append(
                Problem(
                    where, "These initial values lie outside the unknowns' bounds or structure."
                )
            )
    return problems


def check_submission(
    body: Any, max_chains: int = DEFAULT_MAX_CHAINS, max_draws: int = DEFAULT_MAX_DRAWS
) -> list[Problem]:
    """Every problem with a submission: model and data, sampler settings, verdict thresholds.

    ``max_chains`` and ``max_draws`` are the deployment's limits (the service passes its
    configured values); ``max_draws`` bounds the draws and the warm-up iterations of each chain.
    """
    from worker.modeling import check_model

    if not isinstance(body, dict):
        return [Problem("", "The submission must be a JSON object.")]
    problems = [
        Problem(f"/{escape_token(name)}", f"Unknown member '{name}' of the submission.")
        for name in body
        if name not in TOP_LEVEL_MEMBERS
    ]
    if "model" not in body:
        problems.append(Problem("/model", "The submission has no model."))
    else:
        problems.extend(check_model(body["model"], body.get("data") or {}))
    if body.get("data") is not None and not isinstance(body["data"], dict):
        problems.append(Problem("/data", "The data must be an object of input names to values."))
    sampler_found = sampler_problems(body.get("sampler"), max_chains, max_draws)
    problems.extend(sampler_found)
    problems.extend(summary_problems(body.get("summary")))
    problems.extend(check_thresholds(body.get("checks")))
    problems.extend(member_problems(body.get("warm_start"), max_chains))
    if not problems:
        problems.extend(_approximation_problems(body))
    if not problems:
        problems.extend(_integer_unknown_problems(body))
    if not problems:
        problems.extend(_initial_value_problems(body))
    if not problems:
        problems.extend(warm_start_problems(body))
    if not problems:
        problems.extend(pattern_problems(body))
    return problems


def _approximation_problems(body: dict) -> list[Problem]:
    """A Laplace or grid job runs as one task, starts from no earlier chain, and a grid covers
    at most two unconstrained coordinates."""
    sampler = body.get("sampler") or {}
    method = sampler.get("method")
    if method not in APPROXIMATION_METHODS:
        return []
    problems = []
    if sampler.get("chains", 1) != 1:
        problems.append(Problem("/sampler/chains", f"a {method} job runs once: leave chains "
                                                    "out or set it to 1"))
    if sampler.get("warmup_iterations", 0) != 0:
        problems.append(Problem("/sampler/warmup_iterations", f"a {method} job has no warm-up: "
                                                               "leave it out or set it to 0"))
    if body.get("warm_start") is not None:
        problems.append(Problem("/warm_start", f"a {method} job does not start from an earlier "
                                               "job's chains"))
    if method == "grid":
        reason = grid_dimension_problem(compile_body(body))
        if reason is not None:
            problems.append(Problem("/sampler/method", reason))
    return problems


def _integer_unknown_problems(body: dict) -> list[Problem]:
    """What a model with integer unknowns cannot be run with: an approximation built on
    derivatives with respect to every unknown (a Laplace approximation's curvature, a grid over
    the unconstrained space), and warm starts, whose records hold no integer values."""
    spec = body["model"]
    declared = spec.get("unknowns") or {}
    integers = [name for name, d in declared.items()
                if isinstance(d, dict) and d.get("type") == "integer"]
    if not integers:
        return []
    problems = []
    method = (body.get("sampler") or {}).get("method")
    if method in APPROXIMATION_METHODS:
        problems.append(Problem("/sampler/method", f"a {method} approximation needs derivatives "
                                f"with respect to every unknown, and '{integers[0]}' is an "
                                "integer unknown; use nuts, hmc or metropolis, whose steps hold "
                                "the integer unknowns while Gibbs updates move them"))
    if body.get("warm_start") is not None:
        problems.append(Problem("/warm_start", "a model with integer unknowns starts each chain "
                                               "afresh: an earlier chain's record holds no "
                                               "values of its integer unknowns"))
    return problems


SUMMARY_MEMBERS = ("interval", "patterns")


def summary_problems(member: Any) -> list[Problem]:
    """Problems with the ``summary`` member: how the posterior summary is laid out."""
    if member is None:
        return []
    if not isinstance(member, dict):
        return [Problem("/summary", "The summary settings must be an object, such as "
                                    '{"interval": 0.9}.')]  # fmt: skip
    problems = [
        Problem(f"/summary/{escape_token(name)}", f"Unknown summary setting '{name}'; known: "
                f"{', '.join(SUMMARY_MEMBERS)}.")
        for name in member
        if name not in SUMMARY_MEMBERS
    ]  # fmt: skip
    if "interval" in member:
        message = interval_problem(member["interval"])
        if message:
            problems.append(Problem("/summary/interval", message))
    patterns = member.get("patterns")
    if "patterns" in member and not (
        isinstance(patterns, list) and all(isinstance(name, str) for name in patterns)
    ):
        problems.append(Problem("/summary/patterns", "The patterns setting must be a list of "
                                "names of integer-valued quantities, such as [\"included\"]."))
    elif patterns:
        seen: set[str] = set()
        for i, name in enumerate(patterns):
            if name in seen:
                problems.append(Problem(f"/summary/patterns/{i}", f"'{name}' is named twice."))
            seen.add(name)
    return problems


def pattern_problems(body: dict) -> list[Problem]:
    """Each name in ``summary.patterns`` must be a quantity of the model whose every element is
    integer-valued, and together they may have at most ``MAX_PATTERN_ELEMENTS`` elements."""
    names = (body.get("summary") or {}).get("patterns") or []
    if not names:
        return []
    model = compile_body(body)
    problems = []
    elements = 0
    for i, name in enumerate(names):
        columns = flat_members(name, model.quantity_names)
        where = f"/summary/patterns/{i}"
        if not columns:
            problems.append(Problem(where, f"The model has no quantity named '{name}'."))
        elif not all(model.quantity_names[c] in model.integer_quantities for c in columns):
            problems.append(Problem(where, f"'{name}' is not integer-valued: joint patterns are "
                                    "tabled for discrete quantities only."))
        elements += len(columns)
    if elements > MAX_PATTERN_ELEMENTS:
        problems.append(Problem("/summary/patterns", f"The named quantities have {elements} "
                                f"elements together; at most {MAX_PATTERN_ELEMENTS} are tabled."))
    return problems


def discrete_summary(
    body: dict,
    draws: np.ndarray | QuantityDraws,
    names: list[str],
    summary: list[dict],
    integers: Any,
) -> list[dict]:
    """Adds each integer-valued quantity's value probabilities to its summary record (member
    ``discrete``; None for the others) and returns the joint-pattern tables the body's
    ``summary.patterns`` asks for (worker/diagnostics/discrete.py). Draws read a quantity at a
    time give the same tables (each is computed per quantity, or per pattern's elements)."""
    wanted = (body.get("summary") or {}).get("patterns") or []
    if isinstance(draws, np.ndarray):
        tables = value_tables(draws, names, integers)
        patterns = [pattern_table(draws, name, names) for name in wanted]
    else:
        tables = {}
        for j, name in enumerate(names):
            if name in integers:
                tables.update(value_tables(draws.quantity(j)[:, :, None], [name], {name}))
        patterns = []
        for name in wanted:
            members = flat_members(name, names)
            if not members:  # as pattern_table says it
                raise ValueError(f"no quantity named {name!r}")
            elements = np.stack([draws.quantity(c) for c in members], axis=2)
            patterns.append(pattern_table(elements, name, [names[c] for c in members]))
    for record in summary:
        record["discrete"] = tables.get(record["name"])
    return patterns


def summary_interval(body: dict) -> float:
    """The central interval's level a checked body asks for (the default when it says none)."""
    member = body.get("summary") or {}
    return float(member.get("interval", DEFAULT_INTERVAL))


def warm_start_problems(body: dict, model: Any = None) -> list[Problem]:
    """Problems with the records of ``body["warm_start"]["chains"]`` against the body's model.

    ``check_submission`` calls it; the service calls it again after it fills ``chains`` from the
    earlier job (those records fail here when that job's model differs in dimension, or the new
    data make its positions impossible). ``model`` saves a compilation when the caller has one.
    """
    member = body.get("warm_start")
    if not isinstance(member, dict) or not member.get("chains"):
        return []
    structural = member_problems(member)
    if structural:
        return structural
    method = (body.get("sampler") or {}).get("method", SamplerSettings().method)
    return record_problems(member, method, model if model is not None else compile_body(body))


# ---- settings and seeds ----------------------------------------------------------------------


def resolve_sampler(body_sampler: dict | None) -> dict:
    """Every setting with its default filled in; a missing seed is drawn from OS entropy.

    The caller records the returned seed with the job: it is what makes the job reproducible.
    ``target_acceptance`` stays None when not given, meaning the method's own default (0.8 for
    NUTS and HMC; 0.234, or 0.44 in one dimension, for Metropolis), which depends on the model's
    dimension. ``initial_values`` stays None when not given.
    """
    given = dict(body_sampler or {})
    resolved: dict[str, Any] = SamplerSettings().as_dict()
    if given.get("method") in APPROXIMATION_METHODS:
        # One task, no warm-up: the deployment's iteration limit then bounds the draws alone.
        resolved.update({"chains": 1, "warmup_iterations": 0})
    else:
        resolved["chains"] = DEFAULT_CHAINS
    resolved.update({"seed": None, "initial_values": None, "reparametrise": True})
    resolved.update(given)
    if resolved["seed"] is None:
        resolved["seed"] = secrets.randbits(63)
    return resolved


def chain_seeds(seed: int, chains: int) -> list[np.random.SeedSequence]:
    """One independent seed sequence per chain: ``SeedSequence(seed).spawn(chains)``."""
    return np.random.SeedSequence(seed).spawn(chains)


def _chain_settings(resolved: dict) -> SamplerSettings:
    return SamplerSettings(**{name: resolved[name] for name in CHAIN_SETTINGS})


def _resolved_with_seed(body: dict) -> dict:
    sampler = body.get("sampler") or {}
    if sampler.get("seed") is None:
        raise ValueError(
            "the submission has no recorded seed; resolve it with resolve_sampler and store it "
            "with the job before starting chains, so every chain and every resume agree"
        )
    return resolve_sampler(sampler)


# ---- one chain -------------------------------------------------------------------------------


@dataclass
class ChainResult:
    """One chain's reported draws and per-draw sampler statistics (sampling phase only).

    ``values`` is (draws, quantities) float64 with columns ``names`` (unknowns, derived,
    per_draw); ``stats`` as the sampler records them; ``adapted`` the final step size and metric
    (or proposal); ``completed`` False when the chain was stopped early; ``evaluations`` how often
    the chain evaluated the model, by phase (None when not known, e.g. a chain read back from a
    store that did not keep the counts).
    """

    names: list[str]
    values: np.ndarray
    stats: dict[str, np.ndarray]
    adapted: dict
    completed: bool
    warmup_stats: dict[str, np.ndarray] = field(default_factory=dict)
    evaluations: EvaluationCounts | None = None
    # Of ``names``, those whose values are whole numbers (discrete draws, integer formulas).
    integer_names: frozenset[str] = frozenset()


class ChainRun:
    """A compiled, initialised chain, ready to run (or to continue after a resume)."""

    def __init__(self, model: Any, chain: Chain, seed: np.random.SeedSequence):
        self.model = model
        self.chain = chain
        self.seed = seed

    def run(
        self,
        progress: ProgressCallback | None = None,
        should_stop: Callable[[], bool] | None = None,
        checkpoint: Callable[[bytes], None] | Callable[[Checkpoint], None] | None = None,
        checkpoint_every: int = 100,
        incremental: bool = False,
    ) -> ChainResult:
        """Run the chain to its end (or until ``should_stop()``), then report its draws.

        With ``incremental`` the checkpoints are ``Checkpoint``s (new records and state apart;
        ``resume_chain`` takes the state and every records block), else snapshot bytes.
        """
        output = self.chain.run(
            progress=progress,
            should_stop=should_stop,
            checkpoint=checkpoint,
            checkpoint_every=checkpoint_every,
            incremental=incremental,
        )
        return ChainResult(
            names=list(self.model.quantity_names),
            values=self.report(output.draws),
            stats=output.stats,
            adapted=output.adapted,
            completed=output.completed,
            warmup_stats=output.warmup_stats,
            evaluations=output.evaluations,
            integer_names=frozenset(self.model.integer_quantities),
        )

    def report(self, draws: np.ndarray) -> np.ndarray:
        """Map unconstrained draws to reported rows, per-draw outputs from the chain's child 1.

        A fresh generator from the same child for every call means the rows depend only on the
        draws, never on whether the chain was interrupted and resumed on the way.
        """
        rng = np.random.default_rng(sampling_sequence(self.seed, GENERATED_CHILD))
        width = len(self.model.quantity_names)
        rows = np.empty((draws.shape[0], width), dtype=np.float64)
        # The compiled model reports one draw at a time (per-draw outputs are random per draw).
        # It gets a copy of each row, not a view: a model keeps its last input in its value
        # slots, and a view would keep the whole draws matrix alive in the worker's model cache.
        for i, u in enumerate(draws):
            rows[i] = self.model.report(u.copy(), rng)
        return rows

    def snapshot(self) -> bytes:
        """The chain's complete state; ``resume_chain`` continues from it exactly."""
        return self.chain.snapshot()

    def incremental_checkpoint(self) -> Checkpoint:
        """The records since the previous incremental checkpoint and the state apart (between
        iterations, as the chain's own checkpoints; see worker.samplers.chain.Checkpoint)."""
        return self.chain.incremental_checkpoint()


def compile_body(body: dict) -> Any:
    """The body's compiled model, with the QR reparametrisation unless the sampler turns it off
    (the sampled coordinates depend on it, so every chain, resume and check compiles alike)."""
    from worker.modeling import compile_model

    reparametrise = (body.get("sampler") or {}).get("reparametrise", True)
    return compile_model(body["model"], body.get("data") or {}, reparametrise=reparametrise)


def start_chain(body: dict, chain_index: int, model: Any = None) -> ChainRun | ApproximationRun:
    """Initialise chain ``chain_index`` (0-based) of a checked submission.

    ``model`` is the body's compiled model when the caller has it already (a worker keeps them
    between chains: worker/model_cache.py); it is compiled here otherwise.
    """
    resolved = _resolved_with_seed(body)
    if not 0 <= chain_index < resolved["chains"]:
        raise ValueError(f"chain index {chain_index} outside 0..{resolved['chains'] - 1}")
    model = compile_body(body) if model is None else model
    seed = chain_seeds(resolved["seed"], resolved["chains"])[chain_index]
    if resolved["method"] in APPROXIMATION_METHODS:
        return ApproximationRun(model, resolved["method"], seed, resolved["draws"], ChainResult)
    values = _initial_values_for(resolved, chain_index)
    point = None if values is None else np.asarray(model.unconstrain(values), dtype=np.float64)
    if model.discrete_size:
        chain: Chain = integer_chain(model, _chain_settings(resolved), seed, point)
        return ChainRun(model, chain, seed)
    warm = None
    # Counted from here: the warm-start checks evaluate the log density at the earlier positions
    # for this chain, so they are part of its warm-up work.
    target = CountedTarget(model)
    if body.get("warm_start") is not None:
        _require_warm_records(body, target)
        warm = chain_state(body["warm_start"], chain_index, resolved["method"])
    chain = Chain(target, _chain_settings(resolved), seed, initial_point=point, warm_start=warm)
    return ChainRun(model, chain, seed)


def _require_warm_records(body: dict, model: Any = None) -> None:
    """Refuse a warm start without records, or with records that do not fit the model."""
    member = body["warm_start"]
    if isinstance(member, dict) and "chains" not in member:
        raise InvalidSubmission([missing_chains_problem()])
    # the deployment's limit on the number of records was applied when the body was checked
    problems = member_problems(member) or warm_start_problems(body, model)
    if problems:
        raise InvalidSubmission(problems)


def resume_chain(
    body: dict, chain_index: int, blob: bytes, model: Any = None, blocks: Sequence[bytes] = ()
) -> ChainRun:
    """Continue chain ``chain_index`` from a snapshot taken by ``ChainRun.snapshot`` or a
    checkpoint (an incremental one's state with its records ``blocks`` in order); refuses a
    snapshot made with other settings than the body's. ``model`` as for ``start_chain``."""
    resolved = _resolved_with_seed(body)
    model = compile_body(body) if model is None else model
    seed = chain_seeds(resolved["seed"], resolved["chains"])[chain_index]
    if model.discrete_size:
        chain: Chain = restore_integer_chain(model, blob, blocks)
    else:
        chain = Chain.restore(model, blob, blocks)
    if chain.settings != _chain_settings(resolved):
        raise ValueError("the snapshot was made with different sampler settings than this job's")
    return ChainRun(model, chain, seed)


# ---- the whole job ---------------------------------------------------------------------------


def pooled_draws(results: list[ChainResult]) -> np.ndarray:
    """(chains, draws, quantities) of the results' values, without a copy when they are already
    the consecutive rows of one such array (as the service's finishing step loads them)."""
    first = results[0].values
    base = first.base if isinstance(first, np.ndarray) else None
    if (isinstance(base, np.ndarray) and base.dtype == np.float64
            and base.shape == (len(results), *first.shape) and base.flags.c_contiguous):
        start, row = base.__array_interface__["data"][0], base.strides[0]
        if all(isinstance(r.values, np.ndarray) and r.values.base is base
               and r.values.shape == first.shape
               and r.values.__array_interface__["data"][0] == start + i * row
               for i, r in enumerate(results)):
            return base
    return np.stack([np.asarray(r.values, dtype=np.float64) for r in results])


def finish_job(
    body: dict, results: list[ChainResult], draws: QuantityDraws | None = None
) -> dict:
    """Summary, sampler report and verdict of a job's completed chains, all JSON-able.

    Returns ``{"summary": [per-quantity records], "sampler": report, "verdict": verdict,
    "patterns": [joint-pattern tables of summary.patterns]}``; the sampler report adds each
    chain's adapted step size and its evaluations of the model (with gradient, and of the log
    density alone, by phase) to ``sampler_checks``' counts. ``draws``, when given, are the
    chains' draws read a quantity at a time (the service streams them from its store); the
    results' ``values`` are then not read.
    """
    if not results:
        raise ValueError("a job needs at least one chain to finish")
    if not all(r.completed for r in results):
        raise ValueError("every chain must be complete before the job is summarised")
    if draws is None:
        lengths = {np.asarray(r.values).shape for r in results}
        if len(lengths) != 1:
            raise ValueError(f"chains of different shapes cannot be pooled: {sorted(lengths)}")
        draws = pooled_draws(results)
    elif tuple(draws.shape[:1]) != (len(results),):
        raise ValueError(f"draws of {draws.shape[0]} chains for {len(results)} results")
    resolved = resolve_sampler({"seed": 0, **(body.get("sampler") or {})})
    names = list(results[0].names)
    model = compile_body(body)
    summary = summarize(draws, names, summary_interval(body))
    patterns = discrete_summary(body, draws, names, summary, model.integer_quantities)
    if resolved["method"] in APPROXIMATION_METHODS:
        report, checked = approximation_verdict(results)
        return {"summary": summary, "sampler": report, "verdict": checked, "patterns": patterns}
    depth = resolved["maximum_tree_depth"] if resolved["method"] == "nuts" else None
    report = sampler_checks([dict(r.stats) for r in results], depth)
    report["step_size_per_chain"] = [
        float(r.adapted["step_size"]) if "step_size" in r.adapted else None for r in results
    ]
    # {"warmup": n, "sampling": n} per chain, or None where a chain's counts are not known.
    report["gradient_evaluations_per_chain"] = [
        None if r.evaluations is None else dict(r.evaluations.gradient) for r in results
    ]
    report["log_density_evaluations_per_chain"] = [
        None if r.evaluations is None else dict(r.evaluations.log_density) for r in results
    ]
    report["reparametrisation"] = model.reparametrisation
    return {
        "summary": summary,
        "sampler": report,
        "verdict": verdict(summary, report, body.get("checks")),
        "patterns": patterns,
    }


def run_in_process(body: dict) -> dict:
    """Check, then run every chain here one after another, then finish the job.

    Returns ``finish_job``'s members plus ``settings`` (resolved, with the seed used), ``names``,
    ``draws`` (chains, draws, quantities) float64, ``stats`` (one dict per chain) and ``adapted``.
    Raises InvalidSubmission with every problem when the body is not valid.
    """
    problems = check_submission(body)
    if problems:
        raise InvalidSubmission(problems)
    if body.get("warm_start") is not None:
        _require_warm_records(body)
    resolved = resolve_sampler(body.get("sampler"))
    job = {**body, "sampler": {k: v for k, v in resolved.items() if v is not None}}
    model = compile_body(job)  # once for every chain: the chains run one after another
    results = [start_chain(job, i, model).run() for i in range(resolved["chains"])]
    outcome = finish_job(job, results)
    return {
        **outcome,
        "settings": resolved,
        "names": list(results[0].names),
        "draws": np.stack([r.values for r in results]),
        "stats": [r.stats for r in results],
        "adapted": [r.adapted for r in results],
    }
