"""Launching Debian's Chromium for the browser tests, and saving page screenshots."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from playwright.sync_api import Page

CHROMIUM = Path("/usr/bin/chromium")
# The test tool's own browser download cannot run here; these flags keep Debian's Chromium from
# reaching out to the network or needing a GPU or a sandbox (the tests run as root in CI).
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
SCREENSHOTS = Path(__file__).resolve().parent / "screenshots"
VIEWPORT = {"width": 1200, "height": 900}


def screenshot_folder() -> Path:
    """tests/web/screenshots/ (committed; docs/web.md shows them) when DRAWYARD_SCREENSHOTS=update,
    else a scratch folder: every run still renders each page, without dirtying the checkout."""
    if os.environ.get("DRAWYARD_SCREENSHOTS") == "update":
        return SCREENSHOTS
    return Path(tempfile.gettempdir()) / "drawyard-screenshots"


def screenshot(page: Page, name: str, full_page: bool = True) -> Path:
    """A PNG of the page in screenshot_folder().

    ``full_page=False`` for an image opened on its own: Chromium cannot measure the full height
    of a bare SVG document, and the capture waits until it times out.
    """
    folder = screenshot_folder()
    folder.mkdir(exist_ok=True)
    path = folder / f"{name}.png"
    page.screenshot(path=str(path), full_page=full_page)
    return path
