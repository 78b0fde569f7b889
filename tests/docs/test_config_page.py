"""docs/configuration.md lists every setting of service/config.py as DRAWYARD_<NAME>, with its
default: the page is where an operator looks, so a setting missing there does not exist for them."""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path

from service.config import Settings

PAGE = Path(__file__).resolve().parents[2] / "docs" / "configuration.md"


def documented() -> dict[str, str]:
    """Variable name -> its default cell, from the table's rows (a row may name several)."""
    found: dict[str, str] = {}
    for line in PAGE.read_text().splitlines():
        cells = [cell.strip() for cell in line.strip("|").split("|")]
        if len(cells) < 3 or not cells[0].startswith("`DRAWYARD_"):
            continue
        names = re.findall(r"`(DRAWYARD_[A-Z_]+)`", cells[0])
        defaults = re.findall(r"`([^`]*)`", cells[1]) or [cells[1]]
        for i, name in enumerate(names):
            found[name] = defaults[i] if len(defaults) == len(names) else defaults[0]
    return found


def shown(value: object) -> set[str]:
    """How a default may be written in the table."""
    if value == "":
        return {"empty", ""}
    text = {str(value)}
    if isinstance(value, float) and value.is_integer():
        text.add(str(int(value)))
    return text


def test_every_setting_is_documented_with_its_default() -> None:
    table = documented()
    for field in dataclasses.fields(Settings):
        name = f"DRAWYARD_{field.name.upper()}"
        assert name in table, f"{name} is not in docs/configuration.md"
        default = field.default
        assert table[name] in shown(default), (name, table[name], default)
