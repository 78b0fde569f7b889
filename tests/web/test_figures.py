"""The four figures render to well-formed SVG that shows what it claims.

Checked against: the XML parser of the standard library (an SVG is an XML document, W3C SVG 1.1
sec. 1.2), scipy.stats.gaussian_kde for the plotted density, and numerical integration
(np.trapezoid) for the density's total mass of one.
"""

from __future__ import annotations

import xml.etree.ElementTree as ElementTree

import numpy as np

from service.plots.figures import (
    MAX_POINTS_PER_CHAIN,
    density_figure,
    rank_figure,
    scatter_figure,
    trace_figure,
)
from service.plots.rendering import to_svg

SVG = "{http://www.w3.org/2000/svg}svg"


def svg_text(figure) -> str:
    content = to_svg(figure)
    root = ElementTree.fromstring(content)
    assert root.tag == SVG
    return content.decode()


def draws(chains: int = 4, n: int = 400, seed: int = 5) -> np.ndarray:
    return np.random.default_rng(seed).normal(size=(chains, n))


def test_trace_draws_one_line_per_chain() -> None:
    figure = trace_figure(draws(), "mu")
    lines = figure.axes[0].get_lines()
    assert len(lines) == 4
    assert all(len(line.get_xdata()) == 400 for line in lines)
    assert "Trace of mu" in svg_text(figure)


def test_trace_of_a_long_run_is_thinned_for_display() -> None:
    figure = trace_figure(draws(2, 5 * MAX_POINTS_PER_CHAIN), "mu")
    assert all(len(line.get_xdata()) <= MAX_POINTS_PER_CHAIN for line in figure.axes[0].get_lines())


def test_rank_figure_has_one_panel_per_chain() -> None:
    figure = rank_figure(draws(3), "tau", bins=10)
    assert len(figure.axes) == 3
    assert [len(axes.patches) for axes in figure.axes] == [11, 11, 11]  # band + 10 bars
    assert "Rank histograms of tau" in svg_text(figure)


def test_density_is_the_kernel_estimate_and_has_mass_one() -> None:
    from scipy import stats

    x = draws(4, 1000)
    figure = density_figure(x, "beta")
    pooled = figure.axes[0].get_lines()[-1]
    grid, height = pooled.get_xdata(), pooled.get_ydata()
    np.testing.assert_allclose(height, stats.gaussian_kde(x.reshape(-1))(grid), rtol=1e-12)
    # The grid runs 5% of the range past the extreme draws; the kernel mass beyond is tiny.
    assert abs(np.trapezoid(height, grid) - 1.0) < 0.01
    svg_text(figure)


def test_density_of_a_constant_says_so() -> None:
    figure = density_figure(np.full((2, 50), 3.0), "fixed")
    assert "single value 3" in svg_text(figure)


def test_scatter_marks_every_divergent_draw() -> None:
    x, y = draws(2, 300, 1), draws(2, 300, 2)
    divergent = np.zeros((2, 300), dtype=bool)
    divergent[0, [5, 17, 250]] = True
    divergent[1, 99] = True
    figure = scatter_figure(x, y, divergent, "a", "b")
    ordinary, marked = figure.axes[0].collections
    assert len(marked.get_offsets()) == 4
    assert len(ordinary.get_offsets()) == 600 - 4
    np.testing.assert_allclose(marked.get_offsets()[:, 0], x[divergent])
    assert "divergent (4)" in svg_text(figure)


def test_scatter_without_divergence_information() -> None:
    figure = scatter_figure(draws(2, 100), draws(2, 100, 9), None, "a", "b")
    assert "reports no divergences" in svg_text(figure)


def test_same_figure_same_bytes() -> None:
    # Cached files and ETags rely on this.
    assert to_svg(trace_figure(draws(), "mu")) == to_svg(trace_figure(draws(), "mu"))
