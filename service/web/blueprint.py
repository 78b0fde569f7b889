"""The web pages' blueprint: templates and static files under service/, the access check, and
errors shown as pages (the plot images keep the API's problem documents)."""

from __future__ import annotations

from flask import Blueprint, render_template, request

from service.problem_details import ApiProblem, problem_response
from service.web.access import check_access

web = Blueprint(
    "web",
    __name__,
    template_folder="../templates",
    static_folder="../static",
    static_url_path="/assets",
)
web.before_request(check_access)

PLOT_ENDPOINT = "web.plot"


@web.errorhandler(ApiProblem)
def problem_page(problem: ApiProblem):
    if request.endpoint == PLOT_ENDPOINT:
        return problem_response(problem, request.path)
    page = render_template("error.html", problem=problem)
    return page, problem.status, problem.headers
