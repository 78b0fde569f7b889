"""Plain-text tables of a summary document's discrete members, for `drawyard probabilities`.

Every probability is printed with its Monte Carlo standard error (one MCSE, "±"), so a reader
sees at once which digits the draws support (docs/discrete-summaries.md).
"""

from __future__ import annotations

from typing import Any


def _estimate(item: dict[str, Any]) -> str:
    error = item.get("error")
    shown = "  (error unknown)" if error is None else f" ± {error:.4f}"
    return f"{item['probability']:.4f}{shown}"


def value_lines(record: dict[str, Any]) -> list[str]:
    """One integer-valued quantity: its probability of one, or its value table."""
    table = record["discrete"]
    name = record["name"]
    one = table.get("probability_of_one")
    if one is not None:
        return [f"{name}: P(= 1) = {_estimate(one)}"]
    lines = [f"{name}: {table['distinct_values']} distinct values drawn"]
    lines += [f"  {row['value']:>10}  {_estimate(row)}" for row in table["values"]]
    other = table.get("other")
    if other is not None:
        lines.append(f"  {'other':>10}  {_estimate(other)}  ({other['distinct_values']} more "
                     "values)")
    return lines


def pattern_lines(table: dict[str, Any]) -> list[str]:
    """One joint-pattern table: most probable patterns first, then the inclusion probabilities
    of a binary vector."""
    lines = [f"joint patterns of {table['name']} ({table['distinct_patterns']} distinct patterns "
             "drawn), most probable first:"]
    for row in table["patterns"]:
        if table["binary"]:
            shown = ", ".join(row["included"]) or "(none included)"
        else:
            shown = "(" + ", ".join(str(v) for v in row["values"]) + ")"
        lines.append(f"  {_estimate(row)}  {shown}")
    other = table.get("other")
    if other is not None:
        lines.append(f"  {_estimate(other)}  the other {other['distinct_patterns']} patterns")
    if table.get("inclusion"):
        lines.append(f"inclusion probabilities of {table['name']}:")
        lines += [f"  {item['name']}: {_estimate(item)}" for item in table["inclusion"]]
    return lines


def discrete_text(document: dict[str, Any]) -> str:
    """Every integer-valued quantity's table, then every joint-pattern table, as text."""
    lines: list[str] = []
    for record in document.get("quantities") or []:
        if record.get("discrete"):
            lines += value_lines(record)
    for table in document.get("patterns") or []:
        lines.append("")
        lines += pattern_lines(table)
    if not lines:
        return "this job has no integer-valued quantities\n"
    return "\n".join(lines) + "\n"
