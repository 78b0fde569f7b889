"""`drawyard models`: register a spec under a name, list names and versions, show a version.

Like the job commands they reach the service only through service.client.DrawyardClient, and
share their connection options and exit codes (0 done, 5 bad input or refused, 6 unreachable).
"""

from __future__ import annotations

import argparse
import json
import textwrap
from pathlib import Path

from service.job_commands import (
    EXIT_CODES_HELP,
    EXIT_PASSED,
    InputProblem,
    _client,
    _connection_options,
    _guarded,
    _read_json,
    _say,
)


def run_register(args: argparse.Namespace) -> int:
    spec = _read_json(args.spec, "spec file")
    if not isinstance(spec, dict):
        raise InputProblem(f"spec file {args.spec}: expected a JSON object (the model spec)")
    with _client(args) as client:
        version = client.register_model(args.name, spec)
    if args.json:
        print(json.dumps(version.raw, indent=2))
    else:
        # The version number alone on stdout, so `V=$(drawyard models register ...)` works.
        print(version.version)
    what = "registered as new version" if version.created else "unchanged: already version"
    _say(f"model {version.name} {what} {version.version} (sha256 {version.sha256})")
    return EXIT_PASSED


def run_list(args: argparse.Namespace) -> int:
    with _client(args) as client:
        if args.name is None:
            models = list(client.iter_models(args.limit))
            if args.json:
                print(json.dumps({"models": [m.raw for m in models]}, indent=2))
                return EXIT_PASSED
            for model in models:
                print(f"{model.name}  latest {model.latest_version:<4}  {model.updated_at}  "
                      f"{model.latest_sha256}")
            return EXIT_PASSED
        versions = list(client.iter_versions(args.name, args.limit))
    if args.json:
        print(json.dumps({"name": args.name, "versions": [v.raw for v in versions]}, indent=2))
        return EXIT_PASSED
    for version in versions:
        print(f"{version.version:<5} {version.sha256}  {version.created_at}  "
              f"{version.created_by or '-'}")
    return EXIT_PASSED


def run_show(args: argparse.Namespace) -> int:
    with _client(args) as client:
        version = client.model_version(args.name, args.version)
    print(json.dumps(version.raw if args.json else version.spec, indent=2))
    return EXIT_PASSED


def add_models_command(commands: argparse._SubParsersAction) -> None:
    """Register `drawyard models` with its subcommands register, list and show."""
    connection = _connection_options()
    formatter = argparse.RawDescriptionHelpFormatter
    models = commands.add_parser(
        "models", help="the model registry: register specs under a name, list, show",
        description=textwrap.fill(
            "Each registration of a spec under a name is an immutable, numbered version with "
            "the SHA-256 of its canonical JSON. Jobs can then name the model instead of sending "
            "it: drawyard submit --model NAME[:VERSION] DATA...", 78),
        epilog=EXIT_CODES_HELP, formatter_class=formatter,
    )
    sub = models.add_subparsers(dest="models_command", required=True, metavar="COMMAND")

    def add(name: str, summary: str, description: str, run):
        parser = sub.add_parser(
            name, help=summary, description=textwrap.fill(description, 78),
            epilog=EXIT_CODES_HELP, parents=[connection], formatter_class=formatter,
        )
        parser.set_defaults(run=_guarded(f"models {name}", run))
        return parser

    register = add(
        "register", "register a spec file as the next version of a name",
        "Check the spec as the service checks a job's model (without data) and store it as the "
        "next version of NAME; prints the version number on stdout. Registering a spec that a "
        "version of NAME already holds changes nothing and prints that version, so a pipeline "
        "may register on every run.",
        run_register,
    )
    register.add_argument("name", help="the model's name: letters, digits, '_', '.', '-'")
    register.add_argument("spec", type=Path, help="the model spec, a JSON file")
    register.add_argument("--json", action="store_true", help="print the version's JSON resource")

    listing = add(
        "list", "list registered models, or one model's versions",
        "Without NAME: every registered name with its latest version, hash and time. With "
        "NAME: its versions, newest first: number, hash, registration time and the key id "
        "that registered it.",
        run_list,
    )
    listing.add_argument("name", nargs="?", default=None, help="list this model's versions")
    listing.add_argument("--limit", type=int, default=None, metavar="N",
                         help="page size used while following the pages (default: the service's)")
    listing.add_argument("--json", action="store_true", help="print the JSON resources")

    show = add(
        "show", "print one version's spec",
        "Print the spec of version VERSION of NAME as JSON (with --json, the whole version "
        "resource), e.g. to check data locally: drawyard models show demand 3 > spec.json; "
        "drawyard check spec.json data.csv",
        run_show,
    )
    show.add_argument("name", help="the model's name")
    show.add_argument("version", type=int, help="the version number")
    show.add_argument("--json", action="store_true", help="print the whole version resource")
