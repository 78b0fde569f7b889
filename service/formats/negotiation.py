"""Which format and layout a results request asked for: ?format=, ?layout=, else Accept."""

from __future__ import annotations

from flask import Request

from service.formats import npz, parquet
from service.formats.layouts import LAYOUTS
from service.job_queries import bad_parameter
from service.problem_details import ApiProblem

MEDIA_TYPES = {
    "json": "application/json",
    "csv": "text/csv",
    "parquet": parquet.MEDIA_TYPE,
    "npz": npz.MEDIA_TYPE,
}
FILE_SUFFIX = {"json": "json", "csv": "csv", "parquet": "parquet", "npz": "npz"}


def _unsupported(detail: str, parameter: str | None = None) -> ApiProblem:
    problems = [{"parameter": parameter, "message": detail}] if parameter else []
    return ApiProblem(406, "unsupported-format", "Unsupported format", detail, problems)


def chosen_format(request: Request) -> str:
    """json, csv, parquet or npz; 406 when neither the parameter nor Accept names one of them."""
    chosen = request.args.get("format")
    names = ", ".join(MEDIA_TYPES)
    if chosen is not None:
        if chosen not in MEDIA_TYPES:
            raise _unsupported(f"The format is one of {names}.", "format")
        return chosen
    offered = list(MEDIA_TYPES.values())
    best = request.accept_mimetypes.best_match(offered)
    if best is None and request.accept_mimetypes:
        raise _unsupported("These results come as " + ", ".join(offered) + ".")
    return next((k for k, v in MEDIA_TYPES.items() if v == best), "json")


def chosen_layout(request: Request, format_name: str) -> str:
    """wide (the default) or long; JSON and CSV come in their own layout only."""
    layout = request.args.get("layout", "wide")
    if layout not in LAYOUTS:
        raise bad_parameter("layout", "The layout is wide or long.")
    if layout == "long" and format_name in ("json", "csv"):
        raise bad_parameter("layout", "The long layout is offered for parquet and npz.")
    return layout
