"""Modeling engine: log density + gradient of spec-compiled models against hand-written numpy.

Every comparison checks first that the functions agree (value and gradient), then times them in
one run, interleaved: 9 rounds, each round a block of calls of every function in turn (the order
rotating from round to round), so that all of them meet the same cache, memory-bandwidth and
machine-load conditions. A figure is the median over the rounds of the process CPU time per call
(CPU time leaves out the time other processes hold the cores). The bench process runs with one
BLAS thread (tests/bench/__main__.py sets OPENBLAS_NUM_THREADS=1), as the workers do.

Baselines, per row:
- logistic regression: "best hand" is the best plain numpy we could write (one X @ b, stable
  softplus through np.logaddexp, one expit, one X.T @ r); "old baseline" is the engine's former
  kernel written out by hand (log_expit(-eta) and expit: the column this bench used to print);
  "two-pass floor" is the two matrix-vector products alone, which no implementation can avoid.
- eight schools: hand numpy and plain Python floats (math module).
- 100-d Gaussian: two triangular (Cholesky) solves with scipy.linalg.solve_triangular.
- sampler bookkeeping: a NUTS chain on the compiled 100-d standard normal; its CPU time minus the
  CPU time spent inside the log density and gradient, per gradient evaluation (leapfrog step).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np
from scipy.linalg import solve_triangular
from scipy.special import expit, log_expit

from worker.modeling import compile_model

LOG_2PI = float(np.log(2.0 * np.pi))
ROUNDS = 9

# Eight schools: Rubin (1981), reprinted in Gelman et al. (2013) BDA3 Table 5.2; from memory.
SCHOOL_EFFECTS = [28.0, 8.0, -3.0, 7.0, -1.0, 1.0, 18.0, 12.0]
SCHOOL_ERRORS = [15.0, 10.0, 16.0, 11.0, 9.0, 11.0, 10.0, 18.0]

Evaluation = Callable[[np.ndarray], tuple[float, np.ndarray]]


def logistic_regression(rows: int = 50_000, covariates: int = 20, seed: int = 20261201):
    """Spec, data and the hand-written baselines (a dict by name) for a logistic regression."""
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
    prior_constant = -np.log(2.5) - 0.5 * LOG_2PI - covariates * 0.5 * LOG_2PI
    y_total = float(y.sum())

    def best_hand(u: np.ndarray) -> tuple[float, np.ndarray]:
        a, b = u[0], u[1:]
        eta = a + x @ b
        lp = (prior_constant - 0.5 * (a / 2.5) ** 2 - 0.5 * b @ b
              + y @ eta - np.logaddexp(0.0, eta).sum())
        r = y - expit(eta)
        grad = np.empty_like(u)
        grad[0] = r.sum() - a / 6.25
        grad[1:] = x.T @ r - b
        return float(lp), grad

    def old_baseline(u: np.ndarray) -> tuple[float, np.ndarray]:
        a, b = u[0], u[1:]
        eta = a + x @ b
        lp = (prior_constant - 0.5 * (a / 2.5) ** 2 - 0.5 * b @ b
              + np.sum(y * eta + log_expit(-eta)))
        r = y - expit(eta)
        grad = np.empty_like(u)
        grad[0] = r.sum() - a / 6.25
        grad[1:] = x.T @ r - b
        return float(lp), grad

    def two_pass_floor(u: np.ndarray) -> tuple[float, np.ndarray]:
        # the two passes over X every implementation makes; no softplus, so not the same value
        eta = x @ u[1:]
        grad = np.empty_like(u)
        grad[0] = y_total
        grad[1:] = x.T @ eta
        return 0.0, grad

    return spec, data, {"best hand": best_hand, "old baseline": old_baseline,
                        "two-pass floor": two_pass_floor}


def eight_schools():
    """Spec, data and hand-written baselines for the non-centred 8-schools model."""
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

    ys, sigmas = list(SCHOOL_EFFECTS), list(SCHOOL_ERRORS)

    def plain_python(u: np.ndarray) -> tuple[float, np.ndarray]:
        values = u.tolist()
        mu, log_tau, z = values[0], values[1], values[2:]
        tau = math.exp(log_tau)
        lp = constant - 0.5 * (mu / 5.0) ** 2 - 0.5 * (tau / 5.0) ** 2 + log_tau
        g_mu, g_tau, g_z = -mu / 25.0, -tau / 25.0, []
        for zj, yj, sj in zip(z, ys, sigmas, strict=True):
            r = (yj - mu - tau * zj) / sj
            lp -= 0.5 * (zj * zj + r * r)
            g = r / sj
            g_mu += g
            g_tau += g * zj
            g_z.append(-zj + tau * g)
        return lp, np.array([g_mu, g_tau * tau + 1.0, *g_z])

    return spec, data, {"hand numpy": hand, "plain Python": plain_python}


def ar_covariance(dimension: int, rho: float) -> np.ndarray:
    lags = np.abs(np.subtract.outer(np.arange(dimension), np.arange(dimension)))
    return rho**lags


def gaussian(dimension: int = 100, rho: float = 0.9):
    """A multivariate normal prior with a fixed AR(rho) covariance, given by its Cholesky factor."""
    factor = np.linalg.cholesky(ar_covariance(dimension, rho))
    location = np.linspace(-1.0, 1.0, dimension)
    spec = {
        "inputs": {"d": {"type": "integer"},
                   "m": {"type": "real", "shape": ["d"]},
                   "L": {"type": "real", "shape": ["d", "d"]}},
        "unknowns": {"x": {"shape": ["d"]}},
        "priors": [{"on": "x", "distribution": "multivariate_normal",
                    "arguments": {"location": "m", "covariance_cholesky": "L"}}],
    }
    data = {"d": dimension, "m": location.tolist(), "L": factor.tolist()}
    constant = -0.5 * dimension * LOG_2PI - float(np.sum(np.log(np.diag(factor))))

    def two_solves(u: np.ndarray) -> tuple[float, np.ndarray]:
        z = solve_triangular(factor, u - location, lower=True, check_finite=False)
        w = solve_triangular(factor, z, lower=True, trans="T", check_finite=False)
        return constant - 0.5 * float(z @ z), -w

    return spec, data, {"two Cholesky solves": two_solves}


def interleaved(functions: dict[str, Evaluation], u: np.ndarray, calls: int) -> dict[str, float]:
    """Median CPU seconds per call of each function over ROUNDS interleaved rounds."""
    names = list(functions)
    per_call = {name: np.empty(ROUNDS) for name in names}
    clock = time.process_time
    for name in names:  # warm caches and lazily built buffers outside the timing
        for _ in range(3):
            functions[name](u)
    for r in range(ROUNDS):
        for name in names[r % len(names):] + names[:r % len(names)]:
            f = functions[name]
            start = clock()
            for _ in range(calls):
                f(u)
            per_call[name][r] = (clock() - start) / calls
    return {name: float(np.median(times)) for name, times in per_call.items()}


def checked(model, baselines: dict[str, Evaluation], u: np.ndarray,
            exempt: tuple[str, ...] = ()) -> None:
    ours_value, ours_grad = model.log_density_and_gradient(u)
    for name, f in baselines.items():
        if name in exempt:
            continue
        value, grad = f(u)
        assert np.isclose(ours_value, value, rtol=1e-10, atol=1e-8), (name, ours_value, value)
        assert np.allclose(ours_grad, grad, rtol=1e-9, atol=1e-8), name


def _us(seconds: float) -> str:
    return f"{seconds * 1e6:9.1f} us"


def compare(label: str, spec: dict, data: dict, baselines: dict[str, Evaluation],
            target_seconds: float = 0.15, exempt: tuple[str, ...] = (),
            seed: int = 1) -> dict[str, float]:
    """Print and return the engine's time over each baseline's (the ratios)."""
    # the hand-written functions take the user's coordinates, so the QR reparametrisation of
    # X @ beta (which changes the sampled coordinates, not the cost per call) is left off
    model = compile_model(spec, data, reparametrise=False)
    u = np.random.default_rng(seed).normal(0.0, 0.5, model.dimension)
    checked(model, baselines, u, exempt)
    start = time.process_time()
    model.log_density_and_gradient(u)
    one = max(time.process_time() - start, 1e-6)
    calls = max(1, int(target_seconds / one / (len(baselines) + 1)))
    times = interleaved({"drawyard": model.log_density_and_gradient, **baselines}, u, calls)
    ours = times["drawyard"]
    ratios = {name: ours / times[name] for name in baselines}
    columns = ", ".join(f"{name} {_us(times[name])} (ratio {ratios[name]:.2f})"
                        for name in baselines)
    print(f"{label}: drawyard {_us(ours)}; {columns}", flush=True)
    return ratios


class TimedTarget:
    """A target whose evaluations add their CPU time to ``seconds``."""

    def __init__(self, model):
        self.model = model
        self.dimension = model.dimension
        self.seconds = 0.0
        self.calls = 0

    def log_density(self, u: np.ndarray) -> float:
        start = time.process_time()
        value = self.model.log_density(u)
        self.seconds += time.process_time() - start
        self.calls += 1
        return value

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        start = time.process_time()
        value = self.model.log_density_and_gradient(u)
        self.seconds += time.process_time() - start
        self.calls += 1
        return value


def sampler_bookkeeping(dimension: int = 100) -> tuple[float, float]:
    """(CPU seconds of sampler work per gradient evaluation, its share of the chain's CPU time).

    The timer pair around each evaluation (about 1 us) is counted as the target's, so the share is
    if anything an underestimate of the sampler's.
    """
    from worker.samplers import Chain, SamplerSettings

    spec = {"inputs": {"d": {"type": "integer"}},
            "unknowns": {"x": {"shape": ["d"]}},
            "priors": [{"on": "x", "distribution": "normal",
                        "arguments": {"location": 0, "scale": 1}}]}
    target = TimedTarget(compile_model(spec, {"d": dimension}))
    settings = SamplerSettings(warmup_iterations=500, draws=500)
    start = time.process_time()
    Chain(target, settings, np.random.SeedSequence(7)).run()
    chain = time.process_time() - start
    outside = chain - target.seconds
    return outside / target.calls, outside / chain


def main() -> None:
    results: list[tuple[str, float, str]] = []
    spec, data, baselines = logistic_regression()
    ratios = compare("logistic regression 50000 x 20", spec, data, baselines,
                     target_seconds=0.4, exempt=("two-pass floor",))
    results += [("logistic 50,000 x 20 / best hand numpy", ratios["best hand"], "<= 1.0"),
                ("logistic 50,000 x 20 / old baseline", ratios["old baseline"], "-"),
                ("logistic 50,000 x 20 / two matrix-vector passes", ratios["two-pass floor"],
                 "<= 2")]
    for rows in (1_000, 10_000, 200_000):
        spec, data, baselines = logistic_regression(rows=rows)
        ratios = compare(f"logistic regression {rows} x 20", spec, data,
                         {"best hand": baselines["best hand"]}, target_seconds=0.3)
        results.append((f"logistic {rows:,} x 20 / best hand numpy", ratios["best hand"],
                        "<= 1.0"))
    spec, data, baselines = eight_schools()
    ratios = compare("eight schools, non-centred", spec, data, baselines, target_seconds=0.1)
    results += [("eight schools / hand numpy", ratios["hand numpy"], "<= 1.5"),
                ("eight schools / plain Python", ratios["plain Python"], "-")]
    spec, data, baselines = gaussian()
    ratios = compare("100-d Gaussian, AR(0.9) covariance", spec, data, baselines,
                     target_seconds=0.1)
    results.append(("100-d Gaussian / two Cholesky solves", ratios["two Cholesky solves"],
                    "<= 1.2"))
    per_step, share = sampler_bookkeeping()
    print(f"NUTS on the compiled 100-d standard normal: sampler work {per_step * 1e6:.1f} us per "
          f"gradient evaluation, {share:.0%} of the chain's CPU time", flush=True)
    print("\nfigure                                               ratio    goal")
    for label, ratio, goal in results:
        print(f"{label:52s} {ratio:6.2f}    {goal}")
    print(f"{'sampler bookkeeping per leapfrog step (us)':52s} {per_step * 1e6:6.1f}    <= 8")
    print(f"{'sampler bookkeeping share of the chain':52s} {share:6.0%}    <= 25 %", flush=True)


if __name__ == "__main__":
    main()
