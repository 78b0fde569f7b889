"""Colour contrast of the stylesheet and the plots, by the WCAG 2.1 formulas.

W3C (2018), Web Content Accessibility Guidelines 2.1: "relative luminance" and "contrast ratio"
in the glossary (sRGB channels linearised with the 0.03928 / 12.92 / 2.4 piecewise formula,
L = 0.2126 R + 0.7152 G + 0.0722 B, ratio (L1 + 0.05) / (L2 + 0.05)); success criterion 1.4.3
asks 4.5:1 for text, 1.4.11 asks 3:1 for focus indicators and parts of graphics.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from service.plots.figures import CHAIN_COLOURS, DIVERGENT_COLOUR

STYLESHEET = Path(__file__).resolve().parents[2] / "service" / "static" / "style.css"
WHITE = "#ffffff"


def luminance(colour: str) -> float:
    channels = [int(colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
    linear = [c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
    return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]


def contrast(a: str, b: str) -> float:
    high, low = sorted((luminance(a), luminance(b)), reverse=True)
    return (high + 0.05) / (low + 0.05)


def variables() -> dict[str, str]:
    found = dict(re.findall(r"--([a-z-]+):\s*(#[0-9a-fA-F]{6})", STYLESHEET.read_text()))
    return {name: value.lower() for name, value in found.items()}


def test_the_formula_on_known_pairs() -> None:
    # Black on white is 21:1 and a colour against itself 1:1, by the definition's bounds.
    assert contrast("#000000", WHITE) == pytest.approx(21.0)
    assert contrast("#767676", "#767676") == pytest.approx(1.0)
    # #767676 on white is the well-known lightest grey that reaches 4.5:1 (common practice).
    assert 4.5 <= contrast("#767676", WHITE) < 4.6


TEXT_PAIRS = [
    ("ink", "paper"), ("muted", "paper"), ("accent", "paper"), ("accent", "accent-wash"),
    ("pass", "pass-wash"), ("fail", "fail-wash"), ("caution", "caution-wash"),
    ("ink", "fail-wash"), ("ink", "caution-wash"),
]


@pytest.mark.parametrize(("text", "background"), TEXT_PAIRS)
def test_text_colours_reach_4_5_to_1(text: str, background: str) -> None:
    colours = variables()
    assert contrast(colours[text], colours[background]) >= 4.5


def test_buttons_and_focus() -> None:
    colours = variables()
    assert contrast(WHITE, colours["accent"]) >= 4.5  # button text on the accent
    assert contrast(colours["focus"], colours["paper"]) >= 3.0
    assert contrast(colours["focus"], WHITE) >= 3.0


@pytest.mark.parametrize("colour", [*CHAIN_COLOURS, DIVERGENT_COLOUR])
def test_plot_colours_stand_out_from_white(colour: str) -> None:
    assert contrast(colour, WHITE) >= 4.5
