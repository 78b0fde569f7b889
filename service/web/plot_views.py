"""Plot images of a succeeded job as SVG, rendered once and then served from the plot cache."""

from __future__ import annotations

import os
from pathlib import Path

from flask import Response, current_app, request

from service.job_queries import bad_parameter
from service.plots.cache import PlotCache
from service.plots.figures import density_figure, rank_figure, scatter_figure, trace_figure
from service.plots.job_arrays import divergent_draws, quantity_draws, quantity_names
from service.plots.probabilities import probability_figure
from service.plots.rendering import to_png, to_svg
from service.problem_details import ApiProblem
from service.results import finished_job
from service.views.context import runtime
from service.web.blueprint import web

KINDS = ("trace", "ranks", "density", "scatter", "probabilities")
CACHE_SETTING = "DRAWYARD_PLOT_CACHE"
DEFAULT_CACHE = "var/plot-cache"
RANK_BINS = (5, 100)


def plot_cache() -> PlotCache:
    """The cache folder: the app's config, else the DRAWYARD_PLOT_CACHE variable, else var/."""
    folder = current_app.config.get(CACHE_SETTING) or os.environ.get(CACHE_SETTING)
    return PlotCache(Path(folder or DEFAULT_CACHE))


def _quantity(names: list[str], parameter: str) -> str:
    name = request.args.get(parameter, "")
    if name not in names:
        raise bad_parameter(parameter, f"No quantity named {name!r} in this job.")
    return name


def discrete_names(summary: list[dict] | None) -> set[str]:
    """The quantities the summary gave value probabilities (integer-valued ones)."""
    return {r["name"] for r in summary or [] if r.get("discrete")}


def _bins() -> int:
    raw = request.args.get("bins", "20")
    low, high = RANK_BINS
    if not raw.isdigit() or not low <= int(raw) <= high:
        raise bad_parameter("bins", f"The number of bins is a whole number from {low} to {high}.")
    return int(raw)


@web.get("/jobs/<job_id>/plots/<kind>.svg")
def plot(job_id: str, kind: str) -> Response:
    return _plot(job_id, kind, "svg")


@web.get("/jobs/<job_id>/plots/<kind>.png")
def plot_png(job_id: str, kind: str) -> Response:
    return _plot(job_id, kind, "png")


IMAGE_TYPES = {"svg": ("image/svg+xml", to_svg), "png": ("image/png", to_png)}


def _plot(job_id: str, kind: str, image_format: str) -> Response:
    mimetype, write = IMAGE_TYPES[image_format]
    if kind not in KINDS:
        raise ApiProblem(404, "plot-not-found", "No such plot",
                         f"The plots are {', '.join(KINDS)}.")
    job, chains = finished_job(runtime(), job_id)
    names = quantity_names(runtime(), chains)
    if kind == "scatter":
        parameters: dict[str, object] = {"x": _quantity(names, "x"), "y": _quantity(names, "y")}
    else:
        parameters = {"quantity": _quantity(names, "quantity")}
        if kind == "ranks":
            parameters["bins"] = _bins()
        if kind == "probabilities" and parameters["quantity"] not in discrete_names(job.summary):
            raise bad_parameter("quantity", f"{parameters['quantity']!r} is not integer-valued: "
                                            "its posterior is shown by the density plot.")

    def render() -> bytes:
        if kind == "scatter":
            pair = quantity_draws(runtime(), chains, [parameters["x"], parameters["y"]])
            figure = scatter_figure(pair[..., 0], pair[..., 1], divergent_draws(runtime(), chains),
                                    str(parameters["x"]), str(parameters["y"]))
        else:
            name = str(parameters["quantity"])
            x = quantity_draws(runtime(), chains, [name])[..., 0]
            if kind == "trace":
                figure = trace_figure(x, name)
            elif kind == "ranks":
                figure = rank_figure(x, name, int(parameters["bins"]))
            elif kind == "probabilities":
                figure = probability_figure(x, name)
            else:
                figure = density_figure(x, name)
        return write(figure)

    # The SVG keeps its earlier cache key; other formats are told apart in theirs.
    keyed = parameters if image_format == "svg" else {**parameters, "format": image_format}
    content, key = plot_cache().get_or_render(job_id, kind, keyed, render)
    etag = f'"{key}"'
    headers = {
        "ETag": etag,
        # A succeeded job's draws never change, so neither does the picture; private because
        # the job belongs to whoever may read it.
        "Cache-Control": "private, max-age=86400, immutable",
    }
    if etag in request.headers.get("If-None-Match", ""):
        return Response(status=304, headers=headers)
    if request.args.get("download"):
        headers["Content-Disposition"] = (
            f'attachment; filename="{job_id}-{kind}.{image_format}"'
        )
    return Response(content, mimetype=mimetype, headers=headers)
