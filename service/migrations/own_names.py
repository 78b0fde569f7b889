"""Revision 0006's one format change: stored documents from the earlier names to our own.

Pure functions over JSON documents and snapshot bytes, used only by
versions/0006_own_names.py (both directions: ``upgrade`` old -> new, ``downgrade`` new -> old).
This file and that revision are the only places that still spell the earlier names; they are
frozen here on purpose, so later changes to the engine do not change what this upgrade does.
"""

from __future__ import annotations

import io
import json
import math
import re
from typing import Any

import numpy as np

# ---- the model spec
STRUCTURES = {"cholesky_correlation": "correlation_factor"}
DISTRIBUTIONS = {"ordered_logistic": "cumulative_logit"}
FUNCTIONS = {"cumulative_sum": "running_sum"}
BLOCK = ("generated", "per_draw")
BLOCK_MEMBERS = {"quantities": "formulas", "pointwise_log_likelihood": "pointwise"}
# a positive increasing vector: one structure before, `ordered` with `lower: 0` now
POSITIVE_ORDERED = "positive_ordered"
# ---- columns of the draws (and names in the summary and diagnostics)
COLUMN_PREFIXES = {"log_likelihood.": "pointwise."}
# ---- sampler settings
SETTINGS = {"metric": "preconditioning", "init_radius": "start_spread"}
PRECONDITIONING = {"unit": "none", "diagonal": "per_coordinate", "dense": "full"}
# ---- per-draw statistics (stored arrays, snapshot arrays "stat_<name>", "warmup_stat_<name>")
STATISTICS = {
    "tree_depth": "doublings",
    "leapfrog_steps": "gradient_calls",
    "acceptance": "accept_probability",
}
# ---- summary records
SUMMARY_FIELDS = {
    "mcse_mean": "mean_error",
    "mcse_of_sd": "sd_error",
    "mcse_quantiles": "quantile_errors",
}
# the earlier summary's fixed quantiles are the median and the 90% central interval
EARLIER_QUANTILES = {"50%": "median", "5%": "lower", "95%": "upper"}
EARLIER_LEVEL = 0.9
RECORD_ORDER = ("name", "median", "interval", "mean", "sd", "rhat", "bulk_ess", "tail_ess",
                "mean_error", "sd_error", "quantile_errors", "note")  # fmt: skip
# ---- snapshot arrays of a Hamiltonian chain
SNAPSHOT_ARRAYS = {"inverse_metric": "preconditioner"}

Direction = bool  # True: old -> new (upgrade); False: new -> old (downgrade)


def _table(mapping: dict[str, str], forward: Direction) -> dict[str, str]:
    return mapping if forward else {new: old for old, new in mapping.items()}


def _renamed_keys(document: dict, mapping: dict[str, str]) -> dict:
    return {mapping.get(key, key): value for key, value in document.items()}


def rename_functions(text: str, forward: Direction) -> str:
    """Function names inside one expression string (whole identifiers only)."""
    for old, new in _table(FUNCTIONS, forward).items():
        text = re.sub(rf"\b{re.escape(old)}\b(?=\s*\()", new, text)
    return text


def _expressions(value: Any, forward: Direction) -> Any:
    if isinstance(value, str):
        return rename_functions(value, forward)
    return value


def _arguments(arguments: Any, forward: Direction) -> Any:
    if not isinstance(arguments, dict):
        return arguments
    return {name: _expressions(value, forward) for name, value in arguments.items()}


def _term(term: Any, forward: Direction) -> Any:
    if not isinstance(term, dict):
        return term
    term = dict(term)
    names = _table(DISTRIBUTIONS, forward)
    if term.get("distribution") in names:
        term["distribution"] = names[term["distribution"]]
    if "arguments" in term:
        term["arguments"] = _arguments(term["arguments"], forward)
    return term


def _unknown(declared: Any, forward: Direction) -> Any:
    if not isinstance(declared, dict):
        return declared
    declared = dict(declared)
    structure = declared.get("structure")
    if forward and structure == POSITIVE_ORDERED:
        declared["structure"] = "ordered"
        declared["lower"] = 0
    elif not forward and structure == "ordered" and declared.get("lower") == 0:
        declared["structure"] = POSITIVE_ORDERED
        del declared["lower"]
    elif structure in _table(STRUCTURES, forward):
        declared["structure"] = _table(STRUCTURES, forward)[structure]
    return declared


def spec(document: Any, forward: Direction = True) -> Any:
    """A model spec with the other direction's names."""
    if not isinstance(document, dict):
        return document
    out = dict(document)
    if isinstance(out.get("unknowns"), dict):
        out["unknowns"] = {n: _unknown(d, forward) for n, d in out["unknowns"].items()}
    if isinstance(out.get("derived"), dict):
        out["derived"] = {n: _expressions(t, forward) for n, t in out["derived"].items()}
    for section in ("priors", "likelihood"):
        if isinstance(out.get(section), list):
            out[section] = [_term(t, forward) for t in out[section]]
    before, after = BLOCK if forward else BLOCK[::-1]
    if before in out:
        block = out.pop(before)
        if isinstance(block, dict):
            block = _renamed_keys(block, _table(BLOCK_MEMBERS, forward))
            formulas = "formulas" if forward else "quantities"
            if isinstance(block.get(formulas), dict):
                block[formulas] = {
                    n: _expressions(t, forward) for n, t in block[formulas].items()
                }
            if isinstance(block.get("predictions"), list):
                block["predictions"] = [_term(t, forward) for t in block["predictions"]]
        out[after] = block
    return out


def settings(document: Any, forward: Direction = True) -> Any:
    """Sampler settings (a body's ``sampler`` member or a job's resolved settings)."""
    if not isinstance(document, dict):
        return document
    out = _renamed_keys(document, _table(SETTINGS, forward))
    key = "preconditioning" if forward else "metric"
    values = _table(PRECONDITIONING, forward)
    if out.get(key) in values:
        out[key] = values[out[key]]
    return out


def adapted(record: Any, forward: Direction = True) -> Any:
    """One chain's adapted state (a warm-start record).

    Hamiltonian records held the inverse metric: a list of variances or a covariance matrix. Now
    they hold ``scales`` (per-coordinate standard deviations, the square roots of the variances)
    or ``covariance``. Square roots and squares round, so a variance read back may differ from
    the stored one in its last bit; a warm start only begins from these values, it does not
    depend on them exactly.
    """
    if not isinstance(record, dict):
        return record
    kind_old, kind_new = "metric", "preconditioning"
    out = dict(record)
    values = _table(PRECONDITIONING, forward)
    before, after = (kind_old, kind_new) if forward else (kind_new, kind_old)
    if before in out:
        kind = out.pop(before)
        out[after] = values.get(kind, kind)
    if forward and "inverse_metric" in out:
        inverse = out.pop("inverse_metric")
        if inverse and isinstance(inverse[0], list):
            out["covariance"] = inverse
        else:
            out["scales"] = [math.sqrt(v) for v in inverse]
    elif not forward and ("scales" in out or "covariance" in out):
        if "scales" in out:
            out["inverse_metric"] = [v * v for v in out.pop("scales")]
        else:
            out["inverse_metric"] = out.pop("covariance")
    return out


def column(name: str, forward: Direction = True) -> str:
    for before, after in _table(COLUMN_PREFIXES, forward).items():
        if name.startswith(before):
            return after + name[len(before) :]
    return name


def statistic(name: str, forward: Direction = True) -> str:
    return _table(STATISTICS, forward).get(name, name)


def quantity_records(records: Any, forward: Direction = True) -> Any:
    """Per-quantity records (a job's summary, or the quantities of its diagnostics)."""
    if not isinstance(records, list):
        return records
    out = []
    for record in records:
        if isinstance(record, dict):
            record = _renamed_keys(record, _table(SUMMARY_FIELDS, forward))
            if isinstance(record.get("name"), str):
                record["name"] = column(record["name"], forward)
            record = _layout(record, forward)
        out.append(record)
    return out


def _layout(record: dict, forward: Direction) -> dict:
    """The earlier record's quantiles as the median and the 90% interval, and back."""
    errors = "quantile_errors" if forward else "mcse_quantiles"
    if forward and isinstance(record.get("quantiles"), dict):
        points = record.pop("quantiles")
        named = {new: points.get(old) for old, new in EARLIER_QUANTILES.items()}
        record["median"] = named["median"]
        record["interval"] = {"level": EARLIER_LEVEL, "lower": named["lower"],
                              "upper": named["upper"]}  # fmt: skip
        if isinstance(record.get(errors), dict):
            earlier = record[errors]
            record[errors] = {new: earlier.get(old) for old, new in EARLIER_QUANTILES.items()}
        ordered = {key: record[key] for key in RECORD_ORDER if key in record}
        return {**ordered, **{k: v for k, v in record.items() if k not in ordered}}
    interval = record.get("interval")
    if not forward and isinstance(interval, dict) and interval.get("level") == EARLIER_LEVEL:
        record = dict(record)
        del record["interval"]
        median = record.pop("median", None)
        named = {"median": median, "lower": interval.get("lower"), "upper": interval.get("upper")}
        record["quantiles"] = {old: named[new] for old, new in EARLIER_QUANTILES.items()}
        if isinstance(record.get(errors), dict):
            now = record[errors]
            record[errors] = {old: now.get(new) for old, new in EARLIER_QUANTILES.items()}
    return record


def verdict(document: Any, forward: Direction = True) -> Any:
    """A verdict: its failed checks name quantities, in the field and in the message."""
    if not isinstance(document, dict) or not isinstance(document.get("failed_checks"), list):
        return document
    checks = []
    for check in document["failed_checks"]:
        if isinstance(check, dict):
            check = dict(check)
            if isinstance(check.get("quantity"), str):
                check["quantity"] = column(check["quantity"], forward)
            if isinstance(check.get("message"), str):
                for before, after in _table(COLUMN_PREFIXES, forward).items():
                    check["message"] = check["message"].replace(before, after)
        checks.append(check)
    return {**document, "failed_checks": checks}


def diagnostics(document: Any, forward: Direction = True) -> Any:
    """A finished job's stored diagnostics: the sampler report (unchanged), the verdict, the
    resolved settings, the column names and the adapted records."""
    if not isinstance(document, dict):
        return document
    out = dict(document)
    if "quantities" in out:
        out["quantities"] = quantity_records(out["quantities"], forward)
    if "verdict" in out:
        out["verdict"] = verdict(out["verdict"], forward)
    if "settings" in out:
        out["settings"] = settings(out["settings"], forward)
    if isinstance(out.get("names"), list):
        out["names"] = [column(n, forward) if isinstance(n, str) else n for n in out["names"]]
    if isinstance(out.get("adapted"), list):
        out["adapted"] = [adapted(r, forward) for r in out["adapted"]]
    return out


def body(document: Any, forward: Direction = True) -> Any:
    """A stored submission: its spec, sampler settings and any warm-start records."""
    if not isinstance(document, dict):
        return document
    out = dict(document)
    if "model" in out:
        out["model"] = spec(out["model"], forward)
    if "sampler" in out:
        out["sampler"] = settings(out["sampler"], forward)
    # the earlier summary was always at the 90% level: a stored job now says so
    if forward and "model" in out and "summary" not in out:
        out["summary"] = {"interval": EARLIER_LEVEL}
    elif not forward and out.get("summary") == {"interval": EARLIER_LEVEL}:
        del out["summary"]
    warm = out.get("warm_start")
    if isinstance(warm, dict) and isinstance(warm.get("chains"), list):
        out["warm_start"] = {**warm, "chains": [adapted(r, forward) for r in warm["chains"]]}
    return out


_HEADER_KEY = "header_json"


def snapshot(blob: bytes | None, forward: Direction = True) -> bytes | None:
    """A chain snapshot (an .npz archive with a JSON header) with its settings, statistic arrays
    and inverse-metric array renamed; no pickle either way."""
    if blob is None:
        return None
    with np.load(io.BytesIO(blob), allow_pickle=False) as archive:
        arrays = {name: archive[name] for name in archive.files}
    header = json.loads(arrays.pop(_HEADER_KEY).tobytes().decode("utf-8"))
    header["settings"] = settings(header.get("settings"), forward)
    renamed: dict[str, np.ndarray] = {}
    statistics = _table(STATISTICS, forward)
    for name, array in arrays.items():
        for prefix in ("warmup_stat_", "stat_"):
            if name.startswith(prefix) and name[len(prefix) :] in statistics:
                name = prefix + statistics[name[len(prefix) :]]
                break
        renamed[_table(SNAPSHOT_ARRAYS, forward).get(name, name)] = array
    text = json.dumps(header, sort_keys=True).encode("utf-8")
    buffer = io.BytesIO()
    np.savez(buffer, **renamed, **{_HEADER_KEY: np.frombuffer(text, dtype=np.uint8)})
    return buffer.getvalue()

