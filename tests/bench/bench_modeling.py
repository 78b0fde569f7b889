"""Modeling engine: log density + gradient of spec-compiled models over hand-written numpy.

Both functions are timed side by side in one run, call by call in alternation, on the same point,
after checking that they agree; the ratio is the median CPU time of ours / the hand-written one's.
"""

from __future__ import annotations

import time

import numpy as np
from scipy.special import expit, log_expit

from worker.modeling import compile_model

LOG_2PI = float(np.log(2.0 * np.pi))

# Eight schools: Rubin (1981), reprinted in Gelman et al. (2013) BDA3 Table 5.2; from memory.
SCHOOL_EFFECTS = [28.0, 8.0, -3.0, 7.0, -1.0, 1.0, 18.0, 12.0]
SCHOOL_ERRORS = [15.0, 10.0, 16.0, 11.0, 9.0, 11.0, 10.0, 18.0]


def logistic_regression(rows: int = 50_000, covariates: int = 20, seed: int = 20261201):
    """Spec, data and a hand-written log density + gradient for a logistic regression."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((rows, covariates))
    true_beta = rng.normal(0.0, 0.5, covariates)
    y = (rng.random(rows) < expit(0.3 + x @ true_beta)).astype(float)
    spec = {
        "inputs": {
            "rows": {"type": "integer"}, "covariates": {"type": "integer"},
            "X": {"type": "real", "shape": ["rows", "covariates"]},
            "y": {"type": "integer", "shape": ["rows"], "lower": 0, "upper": 1},
        },
        "unknowns": {"intercept": {}, "beta": {"shape": ["covariates"]}},
        "priors": [
            {"on": "intercept", "distribution": "normal",
             "arguments": {"location": 0, "scale": 2.5}},
            {"on": "beta", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        ],
        "likelihood": [{"name": "outcome", "observed": "y", "distribution": "bernoulli",
                        "arguments": {"log_odds": "intercept + X @ beta"}}],
    }
    data = {"rows": rows, "covariates": covariates, "X": x.tolist(), "y": y.tolist()}

    def hand(u: np.ndarray) -> tuple[float, np.ndarray]:
        a, b = u[0], u[1:]
        eta = a + x @ b
        lp = (-0.5 * (a / 2.5) ** 2 - np.log(2.5) - 0.5 * LOG_2PI
              - 0.5 * b @ b - covariates * 0.5 * LOG_2PI
              + np.sum(y * eta + log_expit(-eta)))
        r = y - expit(eta)
        grad = np.empty_like(u)
        grad[0] = r.sum() - a / 6.25
        grad[1:] = x.T @ r - b
        return float(lp), grad

    return spec, data, hand


def eight_schools():
    """Spec, data and a hand-written log density + gradient for the non-centred 8-schools model."""
    y = np.array(SCHOOL_EFFECTS)
    sigma = np.array(SCHOOL_ERRORS)
    spec = {
        "inputs": {"schools": {"type": "integer"},
                   "effect": {"type": "real", "shape": ["schools"]},
                   "error": {"type": "real", "shape": ["schools"], "lower": 0}},
        "unknowns": {"mu": {}, "tau": {"lower": 0}, "z": {"shape": ["schools"]}},
        "derived": {"theta": "mu + tau * z"},
        "priors": [
            {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 5}},
            {"on": "tau", "distribution": "half_normal", "arguments": {"scale": 5}},
            {"on": "z", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        ],
        "likelihood": [{"name": "effects", "observed": "effect", "distribution": "normal",
                        "arguments": {"location": "theta", "scale": "error"}}],
    }
    data = {"schools": 8, "effect": SCHOOL_EFFECTS, "error": SCHOOL_ERRORS}
    log_sigma_total = float(np.sum(np.log(sigma)))
    constant = (-np.log(5.0) - 0.5 * LOG_2PI) + (np.log(2.0) - np.log(5.0) - 0.5 * LOG_2PI) \
        - 8 * 0.5 * LOG_2PI - 8 * 0.5 * LOG_2PI - log_sigma_total

    def hand(u: np.ndarray) -> tuple[float, np.ndarray]:
        mu, log_tau, z = u[0], u[1], u[2:]
        tau = np.exp(log_tau)
        theta = mu + tau * z
        r = (y - theta) / sigma
        lp = constant - 0.5 * (mu / 5.0) ** 2 - 0.5 * (tau / 5.0) ** 2 + log_tau \
            - 0.5 * z @ z - 0.5 * r @ r
        g_theta = r / sigma
        grad = np.empty_like(u)
        grad[0] = -mu / 25.0 + g_theta.sum()
        grad[1] = (-tau / 25.0 + g_theta @ z) * tau + 1.0
        grad[2:] = -z + tau * g_theta
        return float(lp), grad

    return spec, data, hand


def compare(label: str, spec: dict, data: dict, hand, calls: int, seed: int = 1) -> float:
    # the hand-written functions take the user's coordinates, so the QR reparametrisation of
    # X @ beta (which changes the sampled coordinates, not the cost per call) is left off
    model = compile_model(spec, data, reparametrise=False)
    u = np.random.default_rng(seed).normal(0.0, 0.5, model.dimension)
    ours_value, ours_grad = model.log_density_and_gradient(u)
    hand_value, hand_grad = hand(u)
    assert np.isclose(ours_value, hand_value, rtol=1e-10, atol=1e-8), (ours_value, hand_value)
    assert np.allclose(ours_grad, hand_grad, rtol=1e-9, atol=1e-8)
    # Alternate single calls and compare medians of process CPU time: CPU time leaves out the time
    # other processes on a shared machine hold the cores, the median drops calls disturbed anyway,
    # and alternation exposes both functions to the same cache and memory-bandwidth conditions.
    # Process (not thread) time, so that BLAS worker threads count for both alike.
    ours_times = np.empty(calls)
    hand_times = np.empty(calls)
    clock = time.process_time
    for i in range(calls):
        start = clock()
        model.log_density_and_gradient(u)
        middle = clock()
        hand(u)
        ours_times[i] = middle - start
        hand_times[i] = clock() - middle
    ours, theirs = float(np.median(ours_times)), float(np.median(hand_times))
    ratio = ours / theirs
    print(f"{label}: compiled {ours * 1e6:9.1f} us, hand-written {theirs * 1e6:9.1f} us, "
          f"ratio {ratio:.2f}", flush=True)
    return ratio


def main() -> None:
    spec, data, hand = logistic_regression()
    r1 = compare("logistic regression 50000 x 20 (target <= 1.3)", spec, data, hand, calls=300)
    spec, data, hand = eight_schools()
    r2 = compare("eight schools, non-centred (target <= 3)", spec, data, hand, calls=20000)
    print(f"ratios: logistic_regression={r1:.2f} eight_schools={r2:.2f}")


if __name__ == "__main__":
    main()
