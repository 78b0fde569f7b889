"""The ``warm_start`` member of a submission: its checks, and the per-chain state it carries.

``{"job": "<earlier job id>", "chains": [record, ...]}``. Each record is an earlier chain's
``adapted`` output exactly as the engine produced it: for NUTS and static HMC ``step_size``,
``preconditioning`` and either ``scales`` (per-coordinate standard deviations, for "none" and
"per_coordinate") or ``covariance`` (for "full"); for Metropolis ``preconditioning``,
``proposal_covariance`` and ``proposal_scale``; for both the chain's final unconstrained
``position``. The service fills
``chains`` from the job it names, after its own checks, so a body may arrive here with ``job``
only: ``member_problems`` accepts that (what a local check of a body sees), while starting a
chain needs the records. Chain k of the new job uses record ``k % len(chains)``.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np

from worker.problems import Problem, escape_token
from worker.samplers.settings import PRECONDITIONINGS
from worker.samplers.target import Target
from worker.samplers.warm_schedule import WarmStart

MEMBERS = ("job", "chains")
HAMILTONIAN_KEYS = ("step_size", "preconditioning", "scales", "covariance", "position")
METROPOLIS_KEYS = ("preconditioning", "proposal_covariance", "proposal_scale", "position")
# Relative asymmetry a full covariance may have from its trip through JSON and the store.
SYMMETRY_TOLERANCE = 1e-9


def member_problems(member: Any, max_chains: int | None = None) -> list[Problem]:
    """Problems with the member's structure (no model needed), pointers under /warm_start;
    ``max_chains`` bounds the number of records (None: no bound)."""
    if member is None:
        return []
    if not isinstance(member, dict):
        return [
            Problem(
                "/warm_start",
                "The warm start must be an object naming the earlier job ('job') whose adapted "
                "state the chains start from.",
            )
        ]
    problems = [
        Problem(f"/warm_start/{escape_token(name)}", f"Unknown member '{name}' of the warm start; "
                f"known: {', '.join(MEMBERS)}.")
        for name in member
        if name not in MEMBERS
    ]  # fmt: skip
    if "job" not in member and "chains" not in member:
        problems.append(Problem("/warm_start/job", "The warm start must name the earlier job."))
    job = member.get("job")
    if "job" in member and not (isinstance(job, str) and job.strip()):
        problems.append(
            Problem("/warm_start/job", f"The earlier job must be named by its id, got {job!r}.")
        )
    chains = member.get("chains")
    if "chains" in member:
        if not isinstance(chains, list) or not chains:
            problems.append(
                Problem(
                    "/warm_start/chains",
                    "The earlier chains' adapted states must be a non-empty list, one per chain.",
                )
            )
        elif max_chains is not None and len(chains) > max_chains:
            problems.append(
                Problem(
                    "/warm_start/chains",
                    f"There are {len(chains)} earlier chains; at most {max_chains} are allowed.",
                )
            )
        else:
            problems.extend(
                Problem(f"/warm_start/chains/{i}", "Each earlier chain's state must be an object.")
                for i, record in enumerate(chains)
                if not isinstance(record, dict)
            )
    return problems


def missing_chains_problem() -> Problem:
    return Problem(
        "/warm_start/chains",
        "The warm start has no earlier chains' states: the service fills them from the job it "
        "names, and a chain cannot start without them.",
    )


def record_problems(member: dict, method: str, target: Target) -> list[Problem]:
    """Problems with every record of a structurally valid member, against the compiled model."""
    problems: list[Problem] = []
    for i, record in enumerate(member.get("chains") or []):
        problems.extend(_one_record_problems(record, f"/warm_start/chains/{i}", method, target))
    return problems


def _one_record_problems(record: dict, where: str, method: str, target: Target) -> list[Problem]:
    metropolis = method == "metropolis"
    keys = METROPOLIS_KEYS if metropolis else HAMILTONIAN_KEYS
    scale_key = "proposal_scale" if metropolis else "step_size"
    shape_keys = ("proposal_covariance",) if metropolis else ("scales", "covariance")
    if scale_key not in record and not any(k in record for k in shape_keys):
        family = "NUTS or static HMC" if metropolis else "Metropolis"
        wanted = "Metropolis" if metropolis else "NUTS or static HMC"
        found = " (it looks like one from a " + family + " chain)" if record else ""
        needs = "' or '".join(shape_keys)
        return [
            Problem(
                where,
                f"This earlier chain's state does not fit a {method} job{found}: it needs "
                f"'{scale_key}' and '{needs}', from a {wanted} job of the same model.",
            )
        ]
    problems = [
        Problem(f"{where}/{escape_token(name)}", f"Unknown member '{name}' of an earlier chain's "
                f"state; known: {', '.join(keys)}.")
        for name in record
        if name not in keys
    ]  # fmt: skip
    scale = record.get(scale_key)
    if not (_is_number(scale) and math.isfinite(scale) and scale > 0):
        what = "proposal scale" if metropolis else "step size"
        problems.append(
            Problem(
                f"{where}/{scale_key}", f"The earlier {what} must be a positive finite number, "
                f"got {scale!r}."
            )
        )  # fmt: skip
    kind = record.get("preconditioning")
    if "preconditioning" in record and kind not in PRECONDITIONINGS:
        problems.append(
            Problem(
                f"{where}/preconditioning",
                f"The earlier preconditioning must be one of {', '.join(PRECONDITIONINGS)}, "
                f"got {kind!r}.",
            )
        )
        kind = None
    present = [k for k in shape_keys if k in record]
    if not present:
        problems.append(
            Problem(where, "This earlier chain's state needs 'scales' (per-coordinate) or "
                    "'covariance' (full).")
        )  # fmt: skip
    elif len(present) > 1:
        problems.append(
            Problem(f"{where}/covariance", "An earlier chain's state holds 'scales' or "
                    "'covariance', not both.")
        )  # fmt: skip
    else:
        key = present[0]
        message = _shape_problem(key, record[key], kind, target.dimension)
        if message:
            problems.append(Problem(f"{where}/{key}", message))
    if "position" in record:
        message = _position_problem(record["position"], target)
        if message:
            problems.append(Problem(f"{where}/position", message))
    return problems


def _shape_problem(key: str, value: Any, kind: str | None, d: int) -> str | None:
    """What is wrong with a record's per-coordinate scales, full covariance or proposal
    covariance (which may be either a list of variances or a matrix), or None."""
    what = {"scales": "The earlier per-coordinate scales", "covariance": "The earlier covariance",
            "proposal_covariance": "The earlier proposal covariance"}[key]
    allowed = {"scales": ((d,),), "covariance": ((d, d),),
               "proposal_covariance": ((d,), (d, d))}[key]
    array = _numbers(value)
    wanted = " or ".join(
        f"a list of {d} numbers" if len(a) == 1 else f"{d} lists of {d} numbers" for a in allowed
    )
    if array is None:
        return f"{what} must be {wanted}."
    if array.shape not in allowed:
        return (
            f"{what} has shape {list(array.shape)}; this model has {d} unconstrained values, so "
            f"it must be {wanted}."
        )
    full = array.ndim == 2
    if kind is not None and full != (kind == "full"):
        return f"{what} has shape {list(array.shape)}, which does not fit preconditioning {kind!r}."
    if not np.isfinite(array).all():
        return f"{what} must hold finite numbers only."
    if not full:
        if not (array > 0).all():
            return f"{what} must hold positive numbers only."
        return None
    if not np.allclose(array, array.T, rtol=SYMMETRY_TOLERANCE, atol=0.0):
        return f"{what} must be symmetric."
    try:
        np.linalg.cholesky(array)
    except np.linalg.LinAlgError:
        return f"{what} must be positive definite."
    return None


def _position_problem(value: Any, target: Target) -> str | None:
    d = target.dimension
    array = _numbers(value)
    if array is None or array.ndim != 1:
        return f"The earlier position must be a list of {d} numbers."
    if array.shape != (d,):
        return (
            f"The earlier position has {array.shape[0]} unconstrained values; this model has {d}."
        )
    if not np.isfinite(array).all():
        return "The earlier position must hold finite numbers only."
    with np.errstate(all="ignore"):
        density = target.log_density(array)
    if not math.isfinite(density):
        return "The log density of the new data is not finite at the earlier position."
    return None


def chain_state(member: dict, chain_index: int, method: str) -> WarmStart:
    """Chain ``chain_index``'s warm start from a checked member holding records."""
    records = member["chains"]
    record = records[chain_index % len(records)]
    metropolis = method == "metropolis"
    if metropolis:
        covariance = np.asarray(record["proposal_covariance"], dtype=np.float64)
    elif "scales" in record:
        covariance = np.square(np.asarray(record["scales"], dtype=np.float64))
    else:
        covariance = np.asarray(record["covariance"], dtype=np.float64)
    kind = record.get("preconditioning") or ("full" if covariance.ndim == 2 else "per_coordinate")
    position = record.get("position")
    return WarmStart(
        metric=kind,
        covariance=covariance,
        step_size=None if metropolis else float(record["step_size"]),
        proposal_scale=float(record["proposal_scale"]) if metropolis else None,
        position=None if position is None else np.asarray(position, dtype=np.float64),
    )


def warm_start_from(result: dict, job: str | None = None) -> dict:
    """The ``warm_start`` member that starts a new job from ``run_in_process``'s ``result``.

    For in-process users (and the benchmark); the service builds the same from its stored chains.
    The records are copied through JSON, as the service's would be.
    """
    member: dict[str, Any] = {"chains": json.loads(json.dumps(result["adapted"]))}
    if job is not None:
        member["job"] = job
    return member


def _numbers(value: Any) -> np.ndarray | None:
    """A list (or list of lists) of JSON numbers as a float array, or None if it is not one."""
    if not isinstance(value, list):
        return None
    items = [value] if not value or not isinstance(value[0], list) else value
    if not all(isinstance(row, list) and all(_is_number(x) for x in row) for row in items):
        return None
    if len({len(row) for row in items}) > 1:
        return None
    return np.asarray(value, dtype=np.float64)


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)
