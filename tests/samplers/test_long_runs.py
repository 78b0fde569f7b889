"""Long NUTS runs (default settings) on targets whose quantiles are known exactly.

Each test checks many probabilities P(x <= q_p) = p and standard deviations, with q_p and the
sd from scipy.stats, as one Bonferroni family at level 0.01 (tests/samplers/quantile_checks.py).
Power: the checks' standard errors are measured from the draws (batch means), and each test
asserts that a 2 % error in the standard deviation would move its strongest check by at least
(critical value + 2.33) standard errors, i.e. would be detected with probability >= 0.99. It
also applies that error to the draws themselves (scaled by 0.98 and 1.02 about the centre) and
asserts that the same checks then fail. The arithmetic behind the run lengths is in each
docstring; "ESS" there is the effective sample size of the statistic in question.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from tests.samplers.eight_schools import NonCentredSchools, Reference
from tests.samplers.multichain import run_chains
from tests.samplers.quantile_checks import (
    Check,
    failures,
    power_shortfall,
    probability_checks,
    scaled,
    sd_check,
)
from worker.samplers import SamplerSettings

LEVELS = (0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99)


def _assert_checks_with_power(checks: list[Check], scaled_checks: dict[float, list[Check]]) -> None:
    strongest = max(checks, key=lambda c: c.shift_per_scale_error)
    print(
        f"{len(checks)} checks, largest |z| {max(abs(c.z) for c in checks):.2f}; a 2 % sd error "
        f"moves {strongest.label} by {strongest.shift_per_scale_error:.2f} se"
    )
    assert not failures(checks), failures(checks)
    shortfall = power_shortfall(checks)
    assert shortfall is None, shortfall
    for factor, moved in scaled_checks.items():
        assert failures(moved), f"draws scaled by {factor} passed every check"


class StudentT:
    """The d-variate Student-t with nu degrees of freedom, location 0 and scale matrix I.

    log density -(nu + d)/2 log(1 + |x|^2 / nu) up to a constant; each coordinate is t_nu and
    |x|^2 / d ~ F(d, nu) (Kotz & Nadarajah 2004, Multivariate t Distributions and Their
    Applications, ch. 1, from memory; both follow from x = z / sqrt(w / nu), z ~ N(0, I),
    w ~ chi^2_nu).
    """

    def __init__(self, dimension: int, nu: float):
        self.dimension = dimension
        self.nu = nu

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        r2 = float(u @ u)
        k = self.nu + self.dimension
        return -0.5 * k * math.log1p(r2 / self.nu), -(k / (self.nu + r2)) * u


class RootOf:
    """The distribution of sqrt(X) for a scipy distribution of X >= 0 (ppf and pdf only)."""

    def __init__(self, square: stats.rv_continuous):
        self.square = square

    def ppf(self, p: float) -> float:
        return math.sqrt(self.square.ppf(p))

    def pdf(self, r: float) -> float:
        return 2.0 * r * self.square.pdf(r * r)


@pytest.mark.slow
def test_ten_dimensional_student_t() -> None:
    """10-d Student-t with 5 degrees of freedom: marginals (pooled) and the radius.

    Power for a 2 % sd error (all draws 2 % too wide or narrow), with 5.71 se needed (critical
    value 3.38 for 14 checks at family level 0.01, plus 2.33 for power 0.99): the marginal sd of
    a t_5 has kurtosis 9, so se(sd)/sd = sqrt((9 - 1) / (4 ESS)) and a sd check would need
    ESS ~ 2 (5.71 / 0.02)^2 ~ 163,000: too many, so the sd is not checked. The radius
    R = |x| / sqrt(d) ~ sqrt(F(10, 5)) carries the scale of all ten coordinates: a 2 % scale
    error moves P(R <= r_p) by f_R(r_p) r_p 0.02 = 0.0165 at p = 0.25 (0.0197 at the median)
    against a se of sqrt(p (1 - p) / ESS) = 0.433 / sqrt(ESS), so 5.71 se needs ESS >= 22,500.
    The radius of a heavy-tailed target mixes slowly (measured: about 0.27 effective draws per
    draw), so 4 chains x 30,000 draws; measured at this seed: 6.85 se.
    """
    target = StudentT(10, 5.0)
    settings = SamplerSettings(draws=30_000)
    draws, outputs = run_chains(target, settings, seed=2018)
    radius = np.sqrt(np.sum(draws**2, axis=2) / 10)

    def family(x: np.ndarray, r: np.ndarray) -> list[Check]:
        return probability_checks("marginal", x, stats.t(5.0), LEVELS, 0.0) + probability_checks(
            "radius", r, RootOf(stats.f(10, 5)), LEVELS, 0.0
        )

    checks = family(draws, radius)
    moved = {f: family(scaled(draws, 0.0, f), f * radius) for f in (0.98, 1.02)}
    _assert_checks_with_power(checks, moved)


@pytest.mark.slow
def test_strongly_correlated_two_dimensional_gaussian() -> None:
    """N(0, S) with sds (1, 3) and correlation 0.99 under the default (per-coordinate)
    preconditioning, which cannot remove the correlation: trajectories are long and the U-turn
    checks do real work.

    Exact: x_1 ~ N(0, 1), x_2 ~ N(0, 9), and the principal directions
    (x_1 + x_2 / 3) / sqrt(2 (1 + rho)) and (x_1 - x_2 / 3) / sqrt(2 (1 - rho)) are N(0, 1)
    (common practice for a bivariate normal). Power for a 2 % sd error: for a normal sd,
    se(sd)/sd = 1 / sqrt(2 ESS) (delta method), so 5.93 se (critical value 3.60 for 32 checks at
    family level 0.01, plus 2.33 for power 0.99) needs ESS >= (5.93 / 0.02)^2 / 2 ~ 44,000 of
    the squared deviations in one direction; 4 chains x 25,000 draws (measured at this seed: the
    narrow direction's sd check moves 6.44 se).
    """
    rho, sds = 0.99, np.array([1.0, 3.0])
    covariance = np.outer(sds, sds) * np.array([[1.0, rho], [rho, 1.0]])
    precision = np.linalg.inv(covariance)

    class Correlated:
        dimension = 2

        def log_density(self, u: np.ndarray) -> float:
            return float(-0.5 * u @ precision @ u)

        def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
            g = -(precision @ u)
            return float(0.5 * u @ g), g

    draws, _ = run_chains(Correlated(), SamplerSettings(draws=25_000), seed=1804)
    z = draws / sds
    wide = (z[..., 0] + z[..., 1]) / math.sqrt(2 * (1 + rho))
    narrow = (z[..., 0] - z[..., 1]) / math.sqrt(2 * (1 - rho))

    def family(columns: dict[str, np.ndarray], truths: dict[str, float]) -> list[Check]:
        checks = []
        for name, x in columns.items():
            truth = stats.norm(0.0, truths[name])
            checks += probability_checks(name, x, truth, LEVELS, 0.0)
            checks.append(sd_check(name, x, truths[name]))
        return checks

    truths = {"x_1": 1.0, "x_2": 3.0, "wide": 1.0, "narrow": 1.0}
    columns = {"x_1": draws[..., 0], "x_2": draws[..., 1], "wide": wide, "narrow": narrow}
    checks = family(columns, truths)
    moved = {f: family({k: f * v for k, v in columns.items()}, truths) for f in (0.98, 1.02)}
    _assert_checks_with_power(checks, moved)


class LogHalfCauchy:
    """u = log sigma for sigma ~ half-Cauchy(0, scale): density 2 e^u / (pi s (1 + e^2u / s^2))."""

    dimension = 1

    def __init__(self, scale: float):
        self.scale = scale

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        t = math.exp(u[0]) / self.scale
        # log(e^u) - log(1 + t^2), with the Jacobian e^u of sigma = e^u
        value = u[0] - math.log1p(t * t)
        return value, np.array([1.0 - 2.0 * t * t / (1.0 + t * t)])


class LogOf:
    """The distribution of log X for a scipy distribution of X > 0 (ppf and pdf only)."""

    def __init__(self, positive: stats.rv_continuous):
        self.positive = positive

    def ppf(self, p: float) -> float:
        return math.log(self.positive.ppf(p))

    def pdf(self, u: float) -> float:
        return self.positive.pdf(math.exp(u)) * math.exp(u)


@pytest.mark.slow
def test_half_cauchy_scale() -> None:
    """sigma ~ half-Cauchy(0, 5), sampled as u = log sigma (a group-level scale's prior).

    Exact: P(sigma <= x) = (2 / pi) atan(x / 5) (scipy.stats.halfcauchy), so the quantiles of
    log sigma are log(5 tan(p pi / 2)); log sigma = log 5 + w with w hyperbolic-secant
    distributed, sd pi / 2 and kurtosis 5 (Johnson, Kotz & Balakrishnan 1995, Continuous
    Univariate Distributions vol. 2, ch. 23, from memory; both checked by quadrature while
    writing this test). The sd of sigma itself is infinite, so the 2 % error is one in the sd of
    log sigma: se(sd)/sd = sqrt((5 - 1) / (4 ESS)) = 1 / sqrt(ESS), and 5.56 se (critical value
    3.23 for 8 checks at family level 0.01, plus 2.33) needs ESS >= (5.56 / 0.02)^2 ~ 77,000
    squared deviations; NUTS gives about 0.25 per draw here, so 4 chains x 100,000 draws
    (measured at this seed: 6.19 se).
    """
    scale = 5.0
    draws, _ = run_chains(LogHalfCauchy(scale), SamplerSettings(draws=100_000), seed=1981)
    u = draws[..., 0]
    truth = LogOf(stats.halfcauchy(scale=scale))
    centre = math.log(scale)  # the median of log sigma

    def family(x: np.ndarray) -> list[Check]:
        return probability_checks("log sigma", x, truth, LEVELS, centre) + [
            sd_check("log sigma", x, math.pi / 2)
        ]

    checks = family(u)
    moved = {f: family(scaled(u, centre, f)) for f in (0.98, 1.02)}
    _assert_checks_with_power(checks, moved)


@pytest.mark.slow
def test_non_centred_eight_schools() -> None:
    """The outside report's model (tests/samplers/eight_schools.py, exact answers by quadrature)
    at default settings, divergences and all: sd(theta_1), P(theta_1 <= q_p), P(tau <= q_p).

    The report saw sd(theta_1) 2-3 % low and the 95 % quantile of tau 0.8-1.9 % low. Power for
    a 2 % sd error, with 5.73 se needed (critical value 3.40 for 15 checks at family level 0.01,
    plus 2.33): the strongest check is P(tau <= q_0.75), which a 2 % scale error moves by
    f(q) q 0.02 = 0.0080 against a se of sqrt(p (1 - p) / ESS) = 0.433 / sqrt(ESS), so it needs
    ESS >= 95,000; sd(theta_1) (kurtosis about 6.5: se(sd)/sd = sqrt(5.5 / (4 ESS))) needs more.
    NUTS gives about 0.8 effective draws of that indicator per draw: 4 chains x 40,000 draws
    (measured at this seed: 6.77 se, with 134 divergences in the 160,000 draws). The compiled
    spec has the same density (tests/validation/test_hierarchical.py checks it).
    """
    schools = Reference()
    draws, outputs = run_chains(NonCentredSchools(), SamplerSettings(draws=40_000), seed=1981)
    theta1 = draws[..., 0] + np.exp(draws[..., 1]) * draws[..., 2]
    tau = np.exp(draws[..., 1])
    centre = schools.theta1_mean

    def family(factor: float) -> list[Check]:
        t1 = scaled(theta1, centre, factor)
        return (
            [sd_check("theta_1", t1, schools.theta1_sd)]
            + probability_checks("theta_1", t1, schools.theta1, LEVELS, centre)
            + probability_checks("tau", factor * tau, schools.tau, LEVELS, 0.0)
        )

    divergences = sum(int(out.stats["divergent"].sum()) for out in outputs)
    print(f"{divergences} divergences in {theta1.size} draws")
    _assert_checks_with_power(family(1.0), {f: family(f) for f in (0.98, 1.02)})
