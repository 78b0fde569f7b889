"""The Flask application factory: ``gunicorn 'service.app:create_app()'``."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from flask import Flask, request
from werkzeug.exceptions import HTTPException

from service.access.authentication import install_access
from service.config import load_settings
from service.problem_details import ApiProblem, http_problem, problem_response
from service.request_records import install_request_records
from service.runtime import build_runtime
from service.structured_logs import configure_logging, install_request_context
from service.views.comparisons import bayes_factors, comparisons
from service.views.health import health
from service.views.jobs import jobs
from service.views.metrics import metrics
from service.views.models import models
from service.views.results import results
from service.web import web


def create_app(config: Mapping[str, Any] | None = None) -> Flask:
    """Build the app: settings from ``config`` over DRAWYARD_* variables, engine and Celery app."""
    settings = load_settings(config)
    app = Flask(__name__)
    app.config["MAX_CONTENT_LENGTH"] = settings.max_body_bytes
    app.json.sort_keys = False
    configure_logging(settings)
    install_request_records(app)
    install_request_context(app)
    runtime = build_runtime(settings)
    app.extensions["drawyard"] = runtime
    for blueprint in (jobs, results, models, comparisons, bayes_factors, health, metrics, web):
        app.register_blueprint(blueprint)
    install_access(app, runtime, (jobs, results, models, comparisons, bayes_factors, metrics))

    @app.errorhandler(ApiProblem)
    def api_problem(problem: ApiProblem):
        return problem_response(problem, request.path)

    @app.errorhandler(HTTPException)
    def http_error(error: HTTPException):
        detail = error.description or error.name
        if error.code == 413:
            detail = (
                f"The body is larger than this service accepts ({settings.max_body_bytes} bytes)."
            )
        problem = http_problem(error.code or 500, error.name, detail)
        if error.code == 413:
            problem.errors = [{"pointer": "", "message": "The whole body is too large."}]
        response = problem_response(problem, request.path)
        for name, value in error.get_headers():
            if name.lower() not in ("content-type", "content-length"):
                response.headers[name] = value
        return response

    return app
