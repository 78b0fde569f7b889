"""Every relative link of README.md and docs/*.md points at a file of the repository, and every
#fragment at a heading of its page, so a reader following the map never lands on nothing.

Fragments are the heading anchors a Markdown renderer derives (GitHub's rule, common practice:
lower case, punctuation other than '-' and '_' dropped, spaces to '-', a repeated heading gets
'-1', '-2', ...); the web pages' renderer (service/web/docs_pages.py) gives its headings the same
ids, and the test checks that too.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from service.web.docs_pages import heading_anchors

REPO = Path(__file__).resolve().parents[2]
PAGES = [REPO / "README.md", *sorted((REPO / "docs").glob("*.md"))]
FENCE = re.compile(r"^```.*?^```", re.S | re.M)
INLINE_CODE = re.compile(r"`[^`\n]*`")
LINK = re.compile(r"!?\[[^\]]*\]\(([^)\s]+)\)")


def links(page: Path) -> list[str]:
    text = INLINE_CODE.sub("", FENCE.sub("", page.read_text()))
    return LINK.findall(text)


def test_the_pages_have_links() -> None:
    assert sum(len(links(page)) for page in PAGES) > 50


@pytest.mark.parametrize("page", PAGES, ids=lambda p: p.name)
def test_every_relative_link_and_fragment_exists(page: Path) -> None:
    for target in links(page):
        if re.match(r"[a-z]+:", target):
            continue  # http:, https:, mailto: point outside the repository
        path, _, fragment = target.partition("#")
        file = (page.parent / path).resolve() if path else page
        assert file.exists(), f"{page.name}: {target} points at no file"
        assert REPO in file.parents or file == REPO, f"{page.name}: {target} leaves the repository"
        if fragment:
            assert file.suffix == ".md", f"{page.name}: {target}: a fragment of a non-page"
            assert fragment in heading_anchors(file.read_text()), (
                f"{page.name}: {target}: no heading of {file.name} has the anchor #{fragment}"
            )


def test_anchors_follow_the_renderers_rule() -> None:
    """Worked by hand from the rule in the module docstring."""
    text = (
        "# The model spec\n## Warm starts (nightly refits)\n### `make demo`\n"
        "## The summary: one record per reported quantity\n## Notes\n## Notes\n"
        "```sh\n# not a heading\n```\n"
    )
    assert heading_anchors(text) == [
        "the-model-spec",
        "warm-starts-nightly-refits",
        "make-demo",
        "the-summary-one-record-per-reported-quantity",
        "notes",
        "notes-1",
    ]


def test_every_page_is_on_the_readme_map() -> None:
    """The README's map is how a reader finds a page: a page missing from it is lost."""
    mapped = {target.partition("#")[0] for target in links(REPO / "README.md")}
    for page in PAGES[1:]:
        assert f"docs/{page.name}" in mapped, f"{page.name} is not on the README's map"
