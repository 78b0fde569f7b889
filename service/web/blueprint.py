"""The web pages' blueprint: templates and static files under service/, the access check, and
errors shown as pages (the plot images keep the API's problem documents)."""

from __future__ import annotations

from flask import Blueprint, Response, render_template, request

from service.access.tenancy import current_identity
from service.problem_details import ApiProblem, note_problem, problem_response
from service.web.access import check_access, form_token, set_form_cookie

web = Blueprint(
    "web",
    __name__,
    template_folder="../templates",
    static_folder="../static",
    static_url_path="/assets",
)
web.before_request(check_access)
web.after_request(set_form_cookie)


@web.app_context_processor
def page_globals() -> dict:
    # form_token: the hidden "csrf" field of every form that changes state; identity: whom the
    # page speaks for (None in open mode), shown beside the sign-out button.
    return {"form_token": form_token, "identity": current_identity()}

PLOT_ENDPOINT = "web.plot"
# The pages load only their own stylesheet, scripts and images, and may not be framed; a plot
# opened on its own may use its inline styles and nothing else.
PAGE_POLICY = (
    "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self'; "
    "connect-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'"
)
PLOT_POLICY = "default-src 'none'; style-src 'unsafe-inline'; frame-ancestors 'self'"


@web.after_request
def security_headers(response: Response) -> Response:
    plot = request.endpoint == PLOT_ENDPOINT
    response.headers.setdefault("Content-Security-Policy", PLOT_POLICY if plot else PAGE_POLICY)
    response.headers.setdefault("X-Content-Type-Options", "nosniff")
    return response


@web.errorhandler(ApiProblem)
def problem_page(problem: ApiProblem):
    if request.endpoint == PLOT_ENDPOINT:
        return problem_response(problem, request.path)
    note_problem(problem.slug)
    page = render_template("error.html", problem=problem)
    return page, problem.status, problem.headers
