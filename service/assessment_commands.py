"""`drawyard loo`, `compare`, `evidence` and `bayes-factor`: judging and comparing finished jobs.

They reach the service only through service.client.DrawyardClient and share the job commands'
connection options and exit codes, so a pipeline can branch on them: 0 when the answer can be
relied on, 3 when it comes with a warning the pipeline should not pass over (an observation
with a high Pareto k-hat, fits the data do not separate, an evidence estimate with a warning),
5 bad input or refused, 6 unreachable.
"""

from __future__ import annotations

import argparse
import json
import textwrap

from service.job_commands import (
    EXIT_CHECKS_FAILED,
    EXIT_CODES_HELP,
    EXIT_PASSED,
    _client,
    _connection_options,
    _guarded,
    _say,
)
from worker.comparison.ranking import SEPARATION


def run_loo(args: argparse.Namespace) -> int:
    with _client(args) as client:
        document = client.predictive_accuracy(args.job)
    if args.json:
        print(json.dumps(document, indent=2))
    else:
        print(f"elpd_loo {document['elpd_loo']:.2f} (se {document['elpd_loo_se']:.2f})  "
              f"p_loo {document['p_loo']:.2f} (se {document['p_loo_se']:.2f})  "
              f"{document['observations']} observations, {document['draws']} draws")
    counts = document["k_counts"]
    _say(f"Pareto k-hat: {counts['good']} good, {counts['ok']} ok, {counts['unreliable']} above "
         f"{document['k_threshold']:.2f}, {counts['unknown']} without a fit")
    for name in document["flagged"]:
        _say(f"  unreliable at {name}")
    return EXIT_CHECKS_FAILED if document["flagged"] else EXIT_PASSED


def run_compare(args: argparse.Namespace) -> int:
    with _client(args) as client:
        document = client.compare(args.jobs)
    if args.json:
        print(json.dumps(document, indent=2))
    else:
        for row in document["ranked"]:
            print(f"{row['job']}  elpd_loo {row['elpd_loo']:10.2f}  difference "
                  f"{row['elpd_difference']:8.2f} (se {row['difference_se']:.2f})  "
                  f"flagged {row['flagged_observations']}")
    for caution in document["cautions"]:
        _say(f"caution: {caution}")
    second = document["ranked"][1]
    separated = -second["elpd_difference"] > SEPARATION * second["difference_se"]
    flagged = any(row["flagged_observations"] for row in document["ranked"])
    return EXIT_PASSED if separated and not flagged else EXIT_CHECKS_FAILED


def run_evidence(args: argparse.Namespace) -> int:
    with _client(args) as client:
        document = client.evidence(args.job)
    if args.json:
        print(json.dumps(document, indent=2))
    else:
        print(f"log evidence {document['log_evidence']:.4f} (relative error "
              f"{document['relative_error']:.3g})")
    for warning in document["warnings"]:
        _say(f"warning: {warning}")
    return EXIT_CHECKS_FAILED if document["warnings"] else EXIT_PASSED


def run_bayes_factor(args: argparse.Namespace) -> int:
    with _client(args) as client:
        document = client.bayes_factor(args.first, args.second)
    if args.json:
        print(json.dumps(document, indent=2))
    else:
        print(f"log Bayes factor {document['log_bayes_factor']:.4f} (error "
              f"{document['error']:.3g}) for {args.first} over {args.second}")
    warnings = [w for record in document["evidence"] for w in record["warnings"]]
    for warning in warnings:
        _say(f"warning: {warning}")
    return EXIT_CHECKS_FAILED if warnings else EXIT_PASSED


def add_assessment_commands(commands: argparse._SubParsersAction) -> None:
    """Register loo, compare, evidence and bayes-factor on the `drawyard` parser."""
    connection = _connection_options()
    formatter = argparse.RawDescriptionHelpFormatter

    def add(name: str, summary: str, description: str, run):
        parser = commands.add_parser(
            name, help=summary, description=textwrap.fill(description, 78),
            epilog=EXIT_CODES_HELP, parents=[connection], formatter_class=formatter,
        )
        parser.set_defaults(run=_guarded(name, run))
        parser.add_argument("--json", action="store_true", help="print the service's document")
        return parser

    loo = add("loo", "PSIS-LOO predictive accuracy of a succeeded job",
              "elpd_loo, p_loo and their standard errors from the job's stored pointwise log "
              "likelihood, with each observation's Pareto k-hat. Exits 3 when any observation's "
              "k-hat is above the threshold.", run_loo)
    loo.add_argument("job", help="the job id")
    compare = add("compare", "order succeeded jobs on the same data by elpd_loo",
                  "Paired differences to the best job with their standard errors. Exits 0 only "
                  f"when the best is ahead of the next by more than {SEPARATION:g} standard "
                  "errors and no job has a flagged observation, else 3.", run_compare)
    compare.add_argument("jobs", nargs="+", metavar="JOB", help="two or more job ids")
    evidence = add("evidence", "log marginal likelihood of a succeeded job (bridge sampling)",
                   "Needs every prior term to be proper. Exits 3 when the estimate comes with a "
                   "warning (too few draws, a large error).", run_evidence)
    evidence.add_argument("job", help="the job id")
    factor = add("bayes-factor", "Bayes factor of two succeeded jobs on the same data",
                 "log p(y | FIRST) - log p(y | SECOND) with its approximate error.",
                 run_bayes_factor)
    factor.add_argument("first", help="the first job id")
    factor.add_argument("second", help="the second job id")
