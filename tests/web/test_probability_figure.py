"""The bar chart of a discrete quantity shows the summary's own numbers.

Checked against: the summary tables of worker/diagnostics/discrete.py for the bar heights and
error bars (the chart must agree with the table the page prints beside it), scipy.stats.poisson
for where the bars of iid Poisson draws stand, and the standard library's XML parser for a
well-formed SVG (W3C SVG 1.1, section 1.2).
"""

from __future__ import annotations

import xml.etree.ElementTree as ElementTree

import numpy as np
from scipy import stats

from service.plots.probabilities import ERROR_BAR_WIDTH, probability_figure
from service.plots.rendering import to_svg
from worker.diagnostics.discrete import MAX_LISTED_VALUES, value_tables


def _bars(figure) -> list:
    return [p for p in figure.axes[0].patches if p.get_width() > 0]


def test_bars_are_the_summary_probabilities_with_an_other_bar() -> None:
    rng = np.random.default_rng(8)
    x = rng.poisson(40.0, (3, 800)).astype(np.float64)
    table = value_tables(x[..., None], ["k"], {"k"})["k"]
    figure = probability_figure(x, "k")
    bars = _bars(figure)
    assert len(bars) == MAX_LISTED_VALUES + 1
    heights = [b.get_height() for b in bars]
    expected = [row["probability"] for row in table["values"]] + [table["other"]["probability"]]
    np.testing.assert_allclose(heights, expected)
    for bar, row in zip(bars, table["values"], strict=False):
        assert abs(bar.get_height() - stats.poisson.pmf(row["value"], 40.0)) < 4 * row["error"]
    labels = [t.get_text() for t in figure.axes[0].get_xticklabels()]
    assert labels[:-1] == [str(row["value"]) for row in table["values"]]
    assert labels[-1] == f"other ({table['other']['distinct_values']})"
    # the error bars' vertical segments (the ErrorbarContainer's line collection)
    segments = figure.axes[0].containers[-1].lines[2][0].get_segments()
    spans = [abs(s[1][1] - s[0][1]) for s in segments]
    errors = [row["error"] for row in table["values"]] + [table["other"]["error"]]
    np.testing.assert_allclose(spans, 2 * ERROR_BAR_WIDTH * np.array(errors))
    svg = to_svg(figure)
    assert ElementTree.fromstring(svg).tag == "{http://www.w3.org/2000/svg}svg"
    assert b"Posterior probabilities of k" in svg


def test_each_chain_marks_its_own_shares() -> None:
    """Chain 2 stuck at 0: its marks sit at 1 over the value 0 and at 0 over the value 1."""
    rng = np.random.default_rng(2)
    x = (rng.random((2, 500)) < 0.6).astype(np.float64)
    x[1] = 0.0
    figure = probability_figure(x, "z")
    marks = [c for c in figure.axes[0].collections if c.get_label() == "chain 2"]
    assert len(marks) == 1
    np.testing.assert_allclose(marks[0].get_offsets()[:, 1], [1.0, 0.0])
    assert len(_bars(figure)) == 2
