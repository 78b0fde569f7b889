"""The quality verdict: the summary and the sampler report held against thresholds.

Every failed check is listed with the value found and the threshold it missed, so a reviewer can
see at once what went wrong and how badly.
"""

from __future__ import annotations

from worker.diagnostics.summary import NOTE_CONSTANT, NOTE_NOT_FINITE, NOTE_TOO_FEW_DRAWS
from worker.diagnostics.thresholds import resolve_thresholds

UNDEFINED_REASON = {
    NOTE_NOT_FINITE: "some of its draws are not finite numbers",
    NOTE_TOO_FEW_DRAWS: "there are fewer than four draws per chain",
}


def shown_against(value: float, limit: float, digits: int = 5) -> str:
    """``value`` with the fewest significant digits (at least ``digits``) that show it on the
    right side of ``limit``: 1.01004 against 1.01 reads 1.01004, not 1.01."""
    for places in range(digits, 18):
        text = f"{value:.{places}g}"
        if (float(text) > limit) == (value > limit) and float(text) != limit:
            return text
    return repr(value)


def _failure(
    check: str, quantity: str | None, value, threshold, message: str, chain: int | None = None
) -> dict:
    return {
        "check": check,
        "quantity": quantity,
        "chain": chain,
        "value": value,
        "threshold": threshold,
        "message": message,
    }


def _quantity_failures(record: dict, limits: dict) -> list[dict]:
    name = record["name"]
    note = record.get("note")
    if note == NOTE_CONSTANT:
        # fixed by the model's structure (or never moved, which R-hat across chains would catch
        # only if chains differed; identical constants everywhere carry no mixing information)
        return []
    failures = []
    max_rhat = limits["max_rhat"]
    if note in UNDEFINED_REASON:
        if max_rhat is not None:
            failures.append(
                _failure(
                    "max_rhat",
                    name,
                    None,
                    max_rhat,
                    f"R-hat of {name} could not be computed because {UNDEFINED_REASON[note]}.",
                )
            )
        return failures
    rhat = record.get("rhat")
    if max_rhat is not None and (rhat is None or rhat > max_rhat):
        shown = "infinite" if rhat is None else shown_against(rhat, max_rhat)
        failures.append(
            _failure(
                "max_rhat",
                name,
                rhat,
                max_rhat,
                f"R-hat of {name} is {shown}, above {max_rhat:g}: the chains do not agree on its "
                "distribution, so they have not converged.",
            )
        )
    for check, field, what in (
        ("min_bulk_ess", "bulk_ess", "bulk effective sample size"),
        ("min_tail_ess", "tail_ess", "tail effective sample size"),
    ):
        limit = limits[check]
        value = record.get(field)
        # None here means a quantile indicator that never varies (a discrete quantity at the edge
        # of its support): there is nothing to estimate, so nothing fails
        if limit is not None and value is not None and value < limit:
            failures.append(
                _failure(
                    check,
                    name,
                    value,
                    limit,
                    f"The {what} of {name} is {shown_against(value, limit, 4)}, below "
                    f"{limit:g}: too few effectively independent draws for reliable estimates.",
                )
            )
    return failures


def _sampler_failures(report: dict, limits: dict) -> list[dict]:
    failures = []
    max_div = limits["max_divergences"]
    total = report.get("divergences")
    if max_div is not None and total is not None and total > max_div:
        per_chain = report.get("divergences_per_chain") or []
        spread = ", ".join(f"chain {i + 1}: {d}" for i, d in enumerate(per_chain))
        failures.append(
            _failure(
                "max_divergences",
                None,
                total,
                max_div,
                f"{total} divergent transitions ({spread}), more than {max_div:g}: the sampler "
                "could not follow the posterior's geometry somewhere, so the draws may be biased.",
            )
        )
    min_ebfmi = limits["min_ebfmi"]
    if min_ebfmi is not None:
        for i, value in enumerate(report.get("ebfmi_per_chain") or []):
            if value is not None and value < min_ebfmi:
                failures.append(
                    _failure(
                        "min_ebfmi",
                        None,
                        value,
                        min_ebfmi,
                        f"E-BFMI of chain {i + 1} is {shown_against(value, min_ebfmi, 3)}, "
                        f"below {min_ebfmi:g}: momentum refreshes move the energy too little, "
                        "so the tails are explored slowly.",
                        chain=i + 1,
                    )
                )
    failures.extend(_depth_failures(report, limits))
    return failures


def _depth_failures(report: dict, limits: dict) -> list[dict]:
    """The share of sampling iterations whose tree reached the maximum depth, against its limit."""
    limit = limits["max_depth_saturation"]
    hits = report.get("tree_depth_hits_per_chain")
    draws = report.get("draws_per_chain") or []
    total = sum(draws)
    if limit is None or hits is None or total == 0:
        return []
    share = sum(hits) / total
    if share <= limit:
        return []
    depth = report.get("maximum_tree_depth")
    spread = ", ".join(
        f"chain {i + 1}: {h / n:.0%}" for i, (h, n) in enumerate(zip(hits, draws, strict=True)) if n
    )
    return [
        _failure(
            "max_depth_saturation",
            None,
            share,
            limit,
            f"{share:.0%} of sampling iterations ({sum(hits)} of {total}; {spread}) reached the "
            f"maximum tree depth of {depth}, more than {limit:.0%}: their trajectories were cut "
            "short, so the chains move slowly and every draw costs the most gradient "
            "evaluations allowed.",
        )
    ]


def verdict(summary: list[dict], sampler_report: dict, thresholds: dict | None = None) -> dict:
    """``{"passed", "failed_checks", "thresholds"}`` for a summary and a sampler report.

    ``thresholds`` overrides the defaults by name (None switches a check off); unknown names or
    bad values raise ``InvalidSubmission`` with pointers under ``/checks``.
    """
    limits = resolve_thresholds(thresholds)
    failures = [f for record in summary for f in _quantity_failures(record, limits)]
    failures.extend(_sampler_failures(sampler_report, limits))
    return {"passed": not failures, "failed_checks": failures, "thresholds": limits}
