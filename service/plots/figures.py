"""The four plots of a finished job, each built from plain arrays into a matplotlib Figure.

Chains are told apart by colour and by line style together, so the plots still read in grey or
for a reader who does not see the colours apart (WCAG 2.1, success criterion 1.4.1, "Use of
Color").
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from scipy import stats

from service.plots.ranks import BAND_COVERAGE, rank_histograms
from service.plots.rendering import new_figure, styled

# Each at least 4.5:1 against white, so thin lines stay visible.
CHAIN_COLOURS = ("#0b5d7a", "#a8481a", "#3f6f12", "#6f3a94", "#7a5f00", "#9b2450", "#2b6659")
CHAIN_STYLES = ("-", "--", "-.", ":")
DIVERGENT_COLOUR = "#c4001a"
DRAW_COLOUR = "#5b6f80"
# Above this many draws per chain, traces and the scatter show an evenly thinned subset: an SVG
# with hundreds of thousands of points is slow to send and to draw, and shows nothing more.
MAX_POINTS_PER_CHAIN = 2000
DENSITY_GRID = 256


def chain_style(chain_index: int) -> dict:
    return {
        "color": CHAIN_COLOURS[chain_index % len(CHAIN_COLOURS)],
        "linestyle": CHAIN_STYLES[chain_index % len(CHAIN_STYLES)],
    }


def display_step(draws: int) -> int:
    return max(1, int(np.ceil(draws / MAX_POINTS_PER_CHAIN)))


def trace_figure(x: np.ndarray, name: str) -> Figure:
    """Each chain's draws of one quantity in order; ``x`` is ``(chains, draws)``."""
    chains, draws = x.shape
    step = display_step(draws)
    iterations = np.arange(1, draws + 1)[::step]
    with styled():
        figure = new_figure(8.0, 3.2)
        axes = figure.add_subplot()
        for c in range(chains):
            axes.plot(iterations, x[c, ::step], linewidth=0.8, label=f"chain {c + 1}",
                      **chain_style(c))
        axes.set_xlabel("draw (after warm-up)" + (f", every {step}th shown" if step > 1 else ""))
        axes.set_ylabel(name)
        axes.set_title(f"Trace of {name}")
        axes.legend(loc="upper right", ncols=min(chains, 4), fontsize=8, framealpha=0.9)
    return figure


def rank_figure(x: np.ndarray, name: str, bins: int = 20) -> Figure:
    """One rank histogram per chain, with the flat line and band expected when chains agree."""
    chains, _ = x.shape
    result = rank_histograms(x, bins)
    widths = np.diff(result.edges)
    with styled():
        figure = new_figure(8.0, 1.1 + 1.0 * chains)
        grid = figure.subplots(chains, 1, sharex=True, squeeze=False)[:, 0]
        for c, axes in enumerate(grid):
            colour = CHAIN_COLOURS[c % len(CHAIN_COLOURS)]
            axes.axhspan(*result.band, color="#e6e6e6", zorder=0)
            axes.bar(result.edges[:-1], result.counts[c], width=widths, align="edge",
                     color=colour, edgecolor="white", linewidth=0.5)
            axes.axhline(result.expected, color="#1a1a1a", linewidth=0.8, linestyle="--")
            axes.set_ylabel(f"chain {c + 1}", rotation=0, ha="right", va="center")
            axes.set_yticks([])
            axes.grid(False)
        grid[-1].set_xlabel(
            f"rank of the draw among all chains' draws (dashed: flat; grey: "
            f"{BAND_COVERAGE:.0%} band)"
        )
        figure.suptitle(f"Rank histograms of {name}")
    return figure


def density_figure(x: np.ndarray, name: str) -> Figure:
    """Gaussian kernel density estimates of one quantity: all chains pooled, and each chain."""
    chains, _ = x.shape
    pooled = x.reshape(-1)
    finite = pooled[np.isfinite(pooled)]
    with styled():
        figure = new_figure(8.0, 3.2)
        axes = figure.add_subplot()
        axes.set_title(f"Marginal posterior density of {name}")
        axes.set_xlabel(name)
        axes.set_ylabel("density")
        if finite.size < 2 or np.ptp(finite) == 0.0:
            value = finite[0] if finite.size else float("nan")
            axes.text(0.5, 0.5, f"{name} takes the single value {value:.6g}",
                      transform=axes.transAxes, ha="center", va="center")
            return figure
        low, high = np.min(finite), np.max(finite)
        margin = 0.05 * (high - low)
        grid = np.linspace(low - margin, high + margin, DENSITY_GRID)
        for c in range(chains):
            values = x[c][np.isfinite(x[c])]
            if values.size >= 2 and np.ptp(values) > 0.0:
                axes.plot(grid, stats.gaussian_kde(values)(grid), linewidth=0.9,
                          label=f"chain {c + 1}", **chain_style(c))
        axes.plot(grid, stats.gaussian_kde(finite)(grid), color="#1a1a1a", linewidth=2.0,
                  label="all chains")
        axes.set_ylim(bottom=0.0)
        axes.legend(loc="upper right", fontsize=8, framealpha=0.9)
    return figure


def scatter_figure(
    x: np.ndarray, y: np.ndarray, divergent: np.ndarray | None, x_name: str, y_name: str
) -> Figure:
    """Draws of two quantities against each other, divergent transitions marked.

    ``x``, ``y`` and ``divergent`` are ``(chains, draws)``; ``divergent`` is None when the method
    has no notion of divergence (Metropolis).
    """
    step = display_step(x.shape[1])
    xs, ys = x[:, ::step].reshape(-1), y[:, ::step].reshape(-1)
    with styled():
        figure = new_figure(6.0, 5.0)
        axes = figure.add_subplot()
        if divergent is None:
            axes.scatter(xs, ys, s=6, color=DRAW_COLOUR, alpha=0.5, linewidths=0,
                         label="draw (this method reports no divergences)")
        else:
            # Every divergent draw is shown, even where the ordinary ones are thinned.
            marked = divergent.astype(bool)
            keep = marked[:, ::step].reshape(-1)
            axes.scatter(xs[~keep], ys[~keep], s=6, color=DRAW_COLOUR, alpha=0.5, linewidths=0,
                         label="draw")
            count = int(marked.sum())
            axes.scatter(x[marked], y[marked], s=36, marker="x", color=DIVERGENT_COLOUR,
                         linewidths=1.4, label=f"divergent ({count})", zorder=3)
        axes.set_xlabel(x_name)
        axes.set_ylabel(y_name)
        axes.set_title(f"{y_name} against {x_name}")
        axes.legend(loc="best", fontsize=8, framealpha=0.9)
    return figure
