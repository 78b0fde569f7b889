"""A discrete quantity's posterior as bars: one per value, heights the posterior probabilities.

A density curve would smear a discrete posterior over values it cannot take; bars at the values
show what it is. The heights and error bars are the summary's own numbers
(worker/diagnostics/discrete.py: the listed values and the 'other' mass), so the picture and the
table agree. Each chain's own share of draws at each value is marked on top, by colour and
marker shape together (WCAG 2.1, success criterion 1.4.1, as the other plots): chains that
agree put their marks near the top of each bar, one that is stuck puts its marks on one value.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from service.plots.figures import CHAIN_COLOURS
from service.plots.rendering import new_figure, styled
from worker.diagnostics.discrete import value_tables

BAR_COLOUR = "#8fb3c7"
OTHER_COLOUR = "#d0d0d0"
ERROR_COLOUR = "#1a1a1a"
CHAIN_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
# Error bars span two Monte Carlo standard errors either side: about a 95% interval for the
# estimate under the normal approximation (common practice).
ERROR_BAR_WIDTH = 2.0


def probability_figure(x: np.ndarray, name: str) -> Figure:
    """Bars of P(x = v) for the listed values of ``x`` ``(chains, draws)`` (whole numbers), the
    'other' mass as a grey bar, error bars of two Monte Carlo errors, each chain's shares."""
    chains, _ = x.shape
    table = value_tables(x[:, :, np.newaxis], [name], {name}).get(name)
    with styled():
        figure = new_figure(9.0, 3.4)
        axes = figure.add_subplot()
        axes.set_title(f"Posterior probabilities of {name}")
        axes.set_ylabel("posterior probability")
        axes.set_xlabel(f"value of {name}")
        if table is None:
            axes.text(0.5, 0.5, f"{name} has draws that are not finite numbers",
                      transform=axes.transAxes, ha="center", va="center")
            return figure
        rows = list(table["values"])
        labels = [str(row["value"]) for row in rows]
        heights = [row["probability"] for row in rows]
        errors = [row["error"] or 0.0 for row in rows]
        colours = [BAR_COLOUR] * len(rows)
        other = table["other"]
        if other is not None:
            labels.append(f"other ({other['distinct_values']})")
            heights.append(other["probability"])
            errors.append(other["error"] or 0.0)
            colours.append(OTHER_COLOUR)
        positions = np.arange(len(labels))
        axes.bar(positions, heights, width=0.7, color=colours, edgecolor="#3a3a3a",
                 linewidth=0.6, label="all chains")
        axes.errorbar(positions, heights, yerr=ERROR_BAR_WIDTH * np.asarray(errors), fmt="none",
                      ecolor=ERROR_COLOUR, elinewidth=1.0, capsize=3,
                      label="± 2 Monte Carlo standard errors")
        listed = np.array([row["value"] for row in rows])
        whole = np.rint(x).astype(np.int64)
        offsets = np.linspace(-0.25, 0.25, chains) if chains > 1 else np.zeros(1)
        for c in range(chains):
            shares = [(whole[c] == v).mean() for v in listed]
            if other is not None:
                shares.append(float((~np.isin(whole[c], listed)).mean()))
            axes.scatter(positions + offsets[c], shares, s=18, zorder=3,
                         marker=CHAIN_MARKERS[c % len(CHAIN_MARKERS)],
                         color=CHAIN_COLOURS[c % len(CHAIN_COLOURS)], label=f"chain {c + 1}")
        axes.set_xticks(positions, labels, rotation=45 if len(labels) > 12 else 0)
        axes.set_ylim(bottom=0.0)
        axes.grid(axis="x", visible=False)
        # beside the axes, so it never covers a bar or a chain's mark
        axes.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, framealpha=0.9)
    return figure
