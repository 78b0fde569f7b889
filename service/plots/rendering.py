"""Figures to SVG bytes with the Agg-family renderers, deterministic for a given input.

Figures are built from ``matplotlib.figure.Figure`` directly, never through pyplot, so no global
figure registry is shared between the threads of a web process.
"""

from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")

from matplotlib import rc_context  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

# A fixed salt and no date make the same figure give the same bytes, so cached files and ETags
# are stable across processes.
SVG_SETTINGS = {"svg.hashsalt": "drawyard-plots", "svg.fonttype": "none"}

STYLE = {
    "font.family": "sans-serif",
    "font.size": 10,
    "axes.edgecolor": "#3a3a3a",
    "axes.labelcolor": "#1a1a1a",
    "xtick.color": "#1a1a1a",
    "ytick.color": "#1a1a1a",
    "axes.grid": True,
    "grid.color": "#d9d9d9",
    "grid.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
}


def new_figure(width: float, height: float) -> Figure:
    with rc_context(STYLE):
        return Figure(figsize=(width, height), layout="constrained")


def styled() -> rc_context:
    """The plot style, for use around building a figure's artists."""
    return rc_context(STYLE)


def to_svg(figure: Figure) -> bytes:
    buffer = io.BytesIO()
    with rc_context({**STYLE, **SVG_SETTINGS}):
        figure.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()


# 150 dots per inch: sharp on a slide or in a report at the figures' sizes (our choice).
PNG_DPI = 150


def to_png(figure: Figure) -> bytes:
    """A raster copy for documents that take no SVG; no software or date in the metadata, so
    the same figure gives the same bytes."""
    buffer = io.BytesIO()
    with rc_context(STYLE):
        figure.savefig(buffer, format="png", dpi=PNG_DPI, metadata={"Software": None})
    return buffer.getvalue()
