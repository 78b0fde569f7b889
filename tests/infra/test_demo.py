"""`make demo` end to end: the real stack, the real job over HTTP, the printed verdict, clean exit.

The demo runs as a user runs it (`python -m service.demo`) on the fresh-machine path, the
serverless filesystem broker, and its posterior is checked against a fit made outside the project:
with sixteen weeks of counts near a hundred per branch and wide priors, the posterior is close to
normal around the maximum-likelihood estimate with the inverse observed information as variance
(the large-sample result, Gelman et al. 2013, Bayesian Data Analysis 3rd ed., section 4.1 and
appendix B, from memory). The estimate and its standard errors come from statsmodels' Poisson GLM
with one indicator per branch and the promotion indicator, which has the same likelihood.
"""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm

from service.demo import BRANCHES, bakery_data


def processes_mentioning(text: str) -> list[int]:
    """Processes whose environment or command line holds text (the demo's var folder)."""
    found = []
    needle = text.encode()
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            if needle in (entry / "environ").read_bytes() or needle in (
                entry / "cmdline"
            ).read_bytes():
                found.append(int(entry.name))
        except OSError:
            continue
    return found


def reference_fit() -> tuple[np.ndarray, np.ndarray]:
    data, _ = bakery_data()
    branch = np.asarray(data["branch"])
    design = np.column_stack(
        [(branch == k).astype(float) for k in range(1, len(BRANCHES) + 1)]
        + [np.asarray(data["promotion"])]
    )
    fit = sm.GLM(np.asarray(data["orders"]), design, family=sm.families.Poisson()).fit()
    return np.asarray(fit.params), np.asarray(fit.bse)


@pytest.mark.slow
def test_demo_runs_a_job_end_to_end_and_stops_everything(tmp_path: Path) -> None:
    var = tmp_path / "var"
    saved = tmp_path / "summary.json"
    result = subprocess.run(
        [sys.executable, "-m", "service.demo", "--var", str(var), "--broker", "filesystem",
         "--save-summary", str(saved)],
        capture_output=True, text=True, timeout=300,
    )
    assert result.returncode == 0, result.stdout + result.stderr
    # The warning banner wraps its text over framed lines; read it back as one paragraph.
    out = " ".join(line.removeprefix("!! ") for line in result.stdout.splitlines())
    assert "SINGLE MACHINE ONLY" in out
    assert "chains" in out and "sampling 1000/1000" in out  # progress was shown
    assert "Verdict: PASSED" in out, out
    assert "does not prove the model right" in out
    assert not processes_mentioning(str(var)), "a process of the demo outlived it"

    summary = {q["name"]: q for q in json.loads(saved.read_text())["quantities"]}
    names = [f"branch_log_orders[{k}]" for k in range(1, len(BRANCHES) + 1)] + ["promotion_effect"]
    for name in names:
        assert name in out  # the printed table lists it
    estimate, standard_error = reference_fit()
    for name, mle, se in zip(names, estimate, standard_error, strict=True):
        q = summary[name]
        # Prior and pooling pull each level by well under a tenth of a standard error here;
        # allow 0.15 SE for that plus 4 Monte Carlo standard errors.
        assert abs(q["mean"] - mle) < 0.15 * se + 4 * q["mean_error"], (name, q["mean"], mle, se)
        # The posterior sd matches the normal approximation's to within 10% plus 4 Monte Carlo
        # standard errors; for a near-normal quantity the sd estimated from n effective draws
        # has standard error sd / sqrt(2 n) (common practice).
        sd_error = q["sd"] / np.sqrt(2 * q["bulk_ess"])
        assert abs(q["sd"] - se) < 0.1 * se + 4 * sd_error, (name, q["sd"], se)
