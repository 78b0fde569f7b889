"""Exact posterior model and inclusion probabilities for linear-regression variable selection.

The reference a variable-selection sampler is checked against: every one of the 2^p models is
enumerated and weighed by its closed-form marginal likelihood, so the answer carries no Monte
Carlo error at all.

The model, for each inclusion pattern gamma in {0, 1}^p (p_gamma covariates included):
    y = alpha 1 + X_gamma beta_gamma + e,   e ~ N(0, sigma^2 I),
    p(alpha, sigma^2) proportional to 1 / sigma^2   (the same for every model, so it cancels),
    beta_gamma | sigma^2 ~ N(0, sigma^2 V_gamma),
with the columns of X centred (so the intercept is orthogonal to them) and independent
inclusions, P(gamma_j = 1) = w.

Two slab priors:
- Zellner's g-prior, V_gamma = g (X_gamma' X_gamma)^-1. Liang, Paulo, Molina, Clyde & Berger
  (2008), "Mixtures of g priors for Bayesian variable selection", JASA 103, section 2 (the
  Bayes factor of a model against the intercept-only model for fixed g; the equation number is
  not given here because we do not have the paper at hand):
      BF(gamma : null) = (1 + g)^((n - 1 - p_gamma) / 2) / (1 + g (1 - R^2_gamma))^((n - 1) / 2),
  with R^2_gamma the ordinary coefficient of determination of the least-squares fit of gamma.
- Any V_gamma, for instance an independent slab V_gamma = s^2 I (the product form
  beta_j = gamma_j b_j, b_j ~ N(0, s^2 sigma^2), of George & McCulloch's (1993) spike-and-slab
  reading with a spike at exactly zero). Our derivation: integrating beta gives
  y | alpha, sigma^2 ~ N(alpha 1, sigma^2 S) with S = I + X_gamma V_gamma X_gamma'; S 1 = 1
  because the columns are centred, so integrating alpha over the line leaves
  (2 pi sigma^2)^(-(n-1)/2) |S|^(-1/2) n^(-1/2) exp(-Q / (2 sigma^2)) with
  Q = y_c' S^-1 y_c (y_c = y - mean(y)); integrating sigma^2 against 1 / sigma^2 gives
  Gamma((n - 1)/2) (Q / 2)^(-(n - 1)/2). Up to a constant shared by every model:
      log m(gamma) = -1/2 log |S| - (n - 1)/2 log Q.
  With V_gamma = g (X_gamma' X_gamma)^-1, |S| = (1 + g)^p_gamma and
  Q = SST (1 + g (1 - R^2)) / (1 + g), which is the g-prior formula above: the two are checked
  against each other and against numerical integration in tests/references/.

With an orthogonal design (X'X = n I, ``orthogonal_design``) the g-prior is the independent
slab with s^2 = g / n, which a spec with one Bernoulli indicator per covariate can state exactly.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

Pattern = tuple[int, ...]


def centred(X: np.ndarray) -> np.ndarray:
    return np.asarray(X, dtype=np.float64) - np.asarray(X, dtype=np.float64).mean(axis=0)


def r_squared(X: np.ndarray, y: np.ndarray, pattern: Pattern) -> float:
    """R^2 of the least-squares fit with an intercept and the covariates in ``pattern``."""
    yc = np.asarray(y, dtype=np.float64) - np.mean(y)
    chosen = centred(X)[:, np.flatnonzero(pattern)]
    if chosen.shape[1] == 0:
        return 0.0
    coefficients, *_ = np.linalg.lstsq(chosen, yc, rcond=None)
    residual = yc - chosen @ coefficients
    return float(1.0 - residual @ residual / (yc @ yc))


def g_prior_log_bayes_factor(r2: float, n: int, size: int, g: float) -> float:
    """log BF(gamma : null) under Zellner's g-prior with fixed g (Liang et al. 2008)."""
    return 0.5 * (n - 1 - size) * np.log1p(g) - 0.5 * (n - 1) * np.log1p(g * (1.0 - r2))


def slab_log_marginal(X: np.ndarray, y: np.ndarray, pattern: Pattern, V: np.ndarray) -> float:
    """log m(gamma) up to the constant shared by every model, for beta_gamma ~ N(0, sigma^2 V)
    (module docstring); ``V`` is p_gamma x p_gamma."""
    yc = np.asarray(y, dtype=np.float64) - np.mean(y)
    n = yc.size
    chosen = centred(X)[:, np.flatnonzero(pattern)]
    S = np.eye(n) + chosen @ V @ chosen.T
    _, log_det = np.linalg.slogdet(S)
    Q = yc @ np.linalg.solve(S, yc)
    return float(-0.5 * log_det - 0.5 * (n - 1) * np.log(Q))


@dataclass(frozen=True)
class Enumeration:
    """Every model's posterior probability, and each covariate's inclusion probability."""

    patterns: list[Pattern]        # all 2^p, in itertools.product order
    probabilities: np.ndarray      # posterior probability of each pattern, summing to 1
    inclusion: np.ndarray          # P(gamma_j = 1 | y), j = 1..p

    def most_probable(self, count: int) -> list[tuple[Pattern, float]]:
        order = np.argsort(-self.probabilities, kind="stable")[:count]
        return [(self.patterns[i], float(self.probabilities[i])) for i in order]

    def probability_of(self, pattern: Pattern) -> float:
        return float(self.probabilities[self.patterns.index(tuple(pattern))])


def enumerate_models(
    p: int, log_evidence: Callable[[Pattern], float], prior_inclusion: float = 0.5
) -> Enumeration:
    """Posterior over all 2^p patterns from each pattern's log marginal likelihood (up to a
    shared constant) and independent Bernoulli(prior_inclusion) inclusions."""
    if p > 16:
        raise ValueError("2^p models are enumerated: keep p at 16 or below")
    patterns = list(itertools.product((0, 1), repeat=p))
    sizes = np.array([sum(s) for s in patterns])
    log_prior = sizes * np.log(prior_inclusion) + (p - sizes) * np.log1p(-prior_inclusion)
    log_post = np.array([log_evidence(s) for s in patterns]) + log_prior
    weights = np.exp(log_post - log_post.max())
    probabilities = weights / weights.sum()
    inclusion = np.array(patterns, dtype=np.float64).T @ probabilities
    return Enumeration(patterns, probabilities, inclusion)


def g_prior_posterior(
    X: np.ndarray, y: np.ndarray, g: float, prior_inclusion: float = 0.5
) -> Enumeration:
    """Exact posterior over models under Zellner's g-prior with fixed g."""
    n, p = np.shape(X)

    def log_bf(pattern: Pattern) -> float:
        return g_prior_log_bayes_factor(r_squared(X, y, pattern), n, sum(pattern), g)

    return enumerate_models(p, log_bf, prior_inclusion)


def independent_slab_posterior(
    X: np.ndarray, y: np.ndarray, slab_scale: float, prior_inclusion: float = 0.5
) -> Enumeration:
    """Exact posterior over models when each included coefficient is N(0, (slab_scale sigma)^2)
    independently: the product form beta_j = gamma_j b_j of a spec, for any design."""
    p = np.shape(X)[1]

    def log_m(pattern: Pattern) -> float:
        size = sum(pattern)
        return slab_log_marginal(X, y, pattern, slab_scale**2 * np.eye(size))

    return enumerate_models(p, log_m, prior_inclusion)


def orthogonal_design(rng: np.random.Generator, n: int, p: int) -> np.ndarray:
    """Centred columns with X'X = n I exactly (p < n): there the g-prior's slab is independent
    N(0, (g / n) sigma^2) per included coefficient."""
    raw = centred(rng.standard_normal((n, p)))
    q, _ = np.linalg.qr(raw)
    return q * np.sqrt(n)
