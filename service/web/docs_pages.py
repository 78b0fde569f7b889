"""The documentation served with the pages: README.md at /docs/, each docs/<name>.md at
/docs/<name>, the files of docs/examples/ as plain text at /docs/examples/<file>.

The Markdown is the repository's own (no HTML passes through: the renderer's html option is off),
rendered by markdown-it-py. Links between pages become links between these views; a link to a
file that is not served (the tests, the contributor guide) becomes its text, and an image its alt
text, so no link on a served page leads nowhere.
"""

from __future__ import annotations

import re
from functools import cache
from pathlib import Path

from flask import current_app, render_template, url_for
from markdown_it import MarkdownIt
from markdown_it.token import Token
from werkzeug.wrappers import Response

from service.problem_details import ApiProblem
from service.web.blueprint import web

# A source checkout has docs/ beside service/; an image built by service/Dockerfile copies it into
# the working directory. DRAWYARD_DOCS_FOLDER (app config) names another.
SOURCE_DOCS = Path(__file__).resolve().parents[2] / "docs"
PAGE_NAME = re.compile(r"[a-z0-9][a-z0-9-]*")
EXAMPLE_NAME = re.compile(r"[A-Za-z0-9][\w.-]*")
HEADING = re.compile(r"^(#{1,6})\s+(.*?)\s*#*\s*$")
FENCE = re.compile(r"^(```|~~~)")


def _not_found(what: str) -> ApiProblem:
    # An ApiProblem, so the blueprint answers a browser with its error page.
    return ApiProblem(404, "page-not-found", "No such page", f"There is no {what}.")


def docs_folder() -> Path:
    configured = current_app.config.get("DRAWYARD_DOCS_FOLDER")
    if configured:
        return Path(configured)
    return SOURCE_DOCS if SOURCE_DOCS.is_dir() else Path.cwd() / "docs"


def anchor(text: str) -> str:
    """A heading's anchor: lower case, code marks and punctuation other than '-' and '_'
    dropped, each space a '-' (the rule of the common Markdown renderers, which the links in
    the pages are written for)."""
    plain = re.sub(r"\[([^\]]*)\]\([^)]*\)", r"\1", text).replace("`", "").lower()
    return re.sub(r"[^\w\- ]", "", plain).replace(" ", "-")


def _numbered(anchors: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for name in anchors:
        count = seen.get(name, 0)
        seen[name] = count + 1
        out.append(name if count == 0 else f"{name}-{count}")
    return out


def heading_anchors(markdown: str) -> list[str]:
    """The anchors of a page's headings in order (fenced code skipped), repeats numbered."""
    found, fenced = [], False
    for line in markdown.splitlines():
        if FENCE.match(line):
            fenced = not fenced
            continue
        match = None if fenced else HEADING.match(line)
        if match:
            found.append(anchor(match.group(2)))
    return _numbered(found)


@cache
def _renderer() -> MarkdownIt:
    return MarkdownIt("commonmark", {"html": False}).enable("table")


def _served_url(target: Path, folder: Path, fragment: str) -> str | None:
    """Where a linked file is served, or None when it is not."""
    suffix = f"#{fragment}" if fragment else ""
    if target == folder.parent / "README.md":
        return url_for("web.docs_index") + suffix
    if target.parent == folder and target.suffix == ".md" and PAGE_NAME.fullmatch(target.stem):
        return url_for("web.docs_page", name=target.stem) + suffix
    if target.parent == folder / "examples" and target.is_file():
        return url_for("web.docs_example", name=target.name)
    return None


def _rewrite(tokens: list[Token], source: Path, folder: Path) -> None:
    for token in tokens:
        if token.type == "heading_open":
            continue
        children = token.children or []
        for i, child in enumerate(children):
            if child.type == "image":
                children[i] = Token("text", "", 0, content=child.content or "")
            if child.type != "link_open":
                continue
            href = str(child.attrs.get("href", ""))
            if re.match(r"[a-z]+:", href) or href.startswith("#"):
                continue
            path, _, fragment = href.partition("#")
            served = _served_url((source.parent / path).resolve(), folder.resolve(), fragment)
            if served is None:  # not served: keep the words, drop the link
                close = next(j for j in range(i, len(children))
                             if children[j].type == "link_close")  # fmt: skip
                children[i] = Token("text", "", 0, content="")
                children[close] = Token("text", "", 0, content="")
            else:
                child.attrs["href"] = served


def render(source: Path, folder: Path) -> tuple[str, str]:
    """A page's title (its first heading) and its HTML, headings carrying their anchors."""
    markdown = source.read_text(encoding="utf-8")
    renderer = _renderer()
    tokens = renderer.parse(markdown)
    anchors = iter(heading_anchors(markdown))
    title = ""
    for i, token in enumerate(tokens):
        if token.type == "heading_open":
            token.attrs["id"] = next(anchors)
            title = title or tokens[i + 1].content.replace("`", "")
    _rewrite(tokens, source, folder)
    return title, renderer.renderer.render(tokens, renderer.options, {})


def _page(source: Path, folder: Path) -> str:
    title, content = render(source, folder)
    return render_template("docs.html", title=title, content=content)


@web.get("/docs/")
def docs_index() -> str:
    folder = docs_folder()
    return _page(folder.parent / "README.md", folder)


@web.get("/docs/<name>")
def docs_page(name: str) -> str:
    folder = docs_folder()
    source = folder / f"{name}.md"
    if not PAGE_NAME.fullmatch(name) or not source.is_file():
        raise _not_found(f"documentation page '{name}'")
    return _page(source, folder)


@web.get("/docs/examples/<name>")
def docs_example(name: str) -> Response:
    source = docs_folder() / "examples" / name
    if not EXAMPLE_NAME.fullmatch(name) or not source.is_file():
        raise _not_found(f"example file '{name}'")
    return Response(source.read_bytes(), mimetype="text/plain")
