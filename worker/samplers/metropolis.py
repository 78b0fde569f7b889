"""Random-walk Metropolis with a proposal covariance and global scale learned during warm-up.

- Metropolis et al. (1953); Hastings (1970): a symmetric Gaussian proposal x' = x + s L z accepted
  with probability min(1, pi(x') / pi(x)).
- Haario, Saksman & Tamminen (2001), An adaptive Metropolis algorithm, Bernoulli 7(2): the proposal
  covariance is the covariance of the chain's own past draws (regularised so it stays positive
  definite), with scale 2.38^2 / d. Here it is refitted at the same points of warm-up the
  Hamiltonian samplers refit their metric (worker/samplers/metric_adaptation.py), from the same
  two-block discounted estimator, so the draws from before the chain settled are forgotten.
- Roberts, Gelman & Gilks (1997), Weak convergence and optimal scaling of random walk Metropolis
  algorithms: optimal acceptance about 0.234 in high dimension (0.44 in one), scale 2.38 / sqrt(d).
- Andrieu & Thoms (2008), A tutorial on adaptive MCMC, section 5 (global adaptive scaling): the
  log scale follows the Robbins-Monro recursion log s += gain_t (alpha_t - target) with gains
  t^-0.6 (summable squares, non-summable sum), restarted with the scale at each covariance update.
  The scale used after warm-up is the average of the log scale over the second half of the final
  warm-up stretch (Polyak-Ruppert averaging), which is less noisy than the last iterate. All
  adaptation stops after warm-up, so sampling is a fixed, valid Markov chain.
"""

from __future__ import annotations

import math

import numpy as np

from worker.samplers.hamiltonian import State
from worker.samplers.target import Target, density_only

GAIN_EXPONENT = 0.6


def default_log_scale(dimension: int) -> float:
    """log(2.38 / sqrt(d)) (Roberts, Gelman & Gilks 1997)."""
    return math.log(2.38 / math.sqrt(dimension))


class RandomWalkProposal:
    """The proposal's shape (covariance factor) and global scale; the warm-up adapts both."""

    def __init__(self, kind: str, covariance: np.ndarray, log_scale: float):
        self.kind = kind
        self.covariance = np.array(covariance, dtype=np.float64)
        self.log_scale = log_scale
        self._factor = (
            np.linalg.cholesky(self.covariance) if kind == "full" else np.sqrt(self.covariance)
        )

    @classmethod
    def initial(cls, kind: str, dimension: int) -> RandomWalkProposal:
        covariance = np.eye(dimension) if kind == "full" else np.ones(dimension)
        return cls(kind, covariance, default_log_scale(dimension))

    def step(self, rng: np.random.Generator) -> np.ndarray:
        z = rng.standard_normal(self.covariance.shape[0])
        shaped = self._factor @ z if self.kind == "full" else self._factor * z
        return math.exp(self.log_scale) * shaped

    def as_json(self) -> dict:
        return {
            "preconditioning": self.kind,
            "proposal_covariance": self.covariance.tolist(),
            "proposal_scale": math.exp(self.log_scale),
        }


def scale_gain(count: int) -> float:
    return float(count) ** -GAIN_EXPONENT


class MetropolisTransition:
    def __init__(self, target: Target, proposal: RandomWalkProposal):
        self.target = target
        self.proposal = proposal

    def __call__(self, state: State, rng: np.random.Generator) -> tuple[State, dict[str, float]]:
        candidate = state.position + self.proposal.step(rng)
        log_density = density_only(self.target, candidate)
        log_ratio = log_density - state.log_density
        acceptance = 1.0 if log_ratio >= 0 else math.exp(log_ratio)
        if rng.random() < acceptance:
            state = State(candidate, log_density, state.gradient)
        stats = {
            "accept_probability": acceptance,
            "log_density": state.log_density,
            "proposal_scale": math.exp(self.proposal.log_scale),
        }
        return state, stats
