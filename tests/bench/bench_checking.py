"""Seconds of checking a submission per MB of body, as a ratio to parsing the same JSON.

Checking is what the API does before it stores a job (service.submissions.validate: the schema,
the engine's checks, the limits). Each case is timed side by side with json.loads of the same
text, medians over the repetitions. The cases are the heaviest we found per byte: expression-heavy
models (long sums, the issue's 3 MB body refused by the work budget, many small quantities) and a
data-heavy one (a long observed vector), so the printed worst ratio bounds what a body can cost.
"""

from __future__ import annotations

import copy
import json
import time
from statistics import median

from service.config import load_settings
from service.problem_details import ApiProblem
from service.submissions import validate
from tests.modeling.test_spec_problems import BASE, DATA

REPEATS = 3
LONG_SUM = "+".join(["mu"] * 3300)


def submission(spec: dict, data: dict) -> dict:
    return {"model": spec, "data": data, "sampler": {"method": "nuts", "chains": 1, "seed": 1}}


def long_sums(count: int) -> dict:
    spec = copy.deepcopy(BASE)
    spec["derived"].update({f"sum{i}": LONG_SUM for i in range(count)})
    return submission(spec, DATA)


def many_quantities(count: int) -> dict:
    spec = copy.deepcopy(BASE)
    spec["derived"].update({f"shift{i}": f"mu + {i} * tau" for i in range(count)})
    return submission(spec, DATA)


def long_data(rows: int) -> dict:
    spec = copy.deepcopy(BASE)
    data = {"J": rows, "y": [float(i % 50) for i in range(rows)], "sigma": [10.0] * rows,
            "school": [1 + i % rows for i in range(rows)]}
    return submission(spec, data)


CASES = {
    "3 sums of 3,300 terms (within budget)": lambda: long_sums(3),
    "300 sums of 3,300 terms (refused)": lambda: long_sums(300),
    "2,000 small derived quantities": lambda: many_quantities(2000),
    "200,000 data rows": lambda: long_data(200_000),
}


def seconds(action) -> float:
    started = time.process_time()
    action()
    return time.process_time() - started


def check(body: dict) -> str:
    try:
        validate(body, load_settings({"max_unknowns": 10**7}))
    except ApiProblem as problem:
        return f"refused ({problem.status})"
    return "accepted"


def main() -> None:
    worst = 0.0
    for label, build in CASES.items():
        body = build()
        text = json.dumps(body)
        megabytes = len(text) / 1e6
        verdict = check(json.loads(text))
        checking, parsing = [], []
        for _ in range(REPEATS):
            parsing.append(seconds(lambda text=text: json.loads(text)))
            parsed = json.loads(text)
            checking.append(seconds(lambda parsed=parsed: check(parsed)))
        c, p = median(checking), median(parsing)
        ratio = c / p if p > 0 else float("inf")
        worst = max(worst, ratio)
        print(f"{label:40s} {megabytes:6.2f} MB {verdict:14s} checking {c / megabytes:7.3f} s/MB "
              f"({c:6.3f} s)  parsing {p / megabytes:7.4f} s/MB  ratio {ratio:9.0f}", flush=True)
    print(f"worst ratio of checking to parsing: {worst:.0f}", flush=True)


if __name__ == "__main__":
    main()
