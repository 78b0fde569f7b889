"""Starting points on the unconstrained space where the log density and gradient are finite."""

from __future__ import annotations

import numpy as np
import scipy.optimize

from worker.samplers.hamiltonian import State
from worker.samplers.target import Target, density_and_gradient, density_only

MAX_ATTEMPTS = 100
OPTIMISER_ITERATIONS = 200


class InitialisationError(RuntimeError):
    """No usable starting point; ``reason`` says why in one plain sentence."""

    def __init__(self, reason: str):
        self.reason = reason
        super().__init__(reason)


def initial_state(
    target: Target,
    how: str,
    radius: float,
    rng: np.random.Generator,
    given: np.ndarray | None,
    needs_gradient: bool,
) -> State:
    """The chain's first state.

    ``how`` is "random" (uniform in [-radius, radius]^d), "given" (``given`` as is), or "optimise"
    (a short L-BFGS-B run on the negative log density from a random box start; the optimiser's
    end point is used when finite, otherwise its start). A user-given point overrides "random".
    """
    d = target.dimension
    if given is not None or how == "given":
        if given is None:
            raise InitialisationError(
                "initialisation is 'given' but no initial values were supplied"
            )
        point = np.array(given, dtype=np.float64).reshape(-1)
        if point.shape != (d,):
            raise InitialisationError(
                f"the initial point has {point.size} unconstrained values; the model has {d}"
            )
        state = _evaluate(target, point, needs_gradient)
        if state is None:
            raise InitialisationError(
                "the log density or its gradient is not finite at the given initial values"
            )
        return state
    for _ in range(MAX_ATTEMPTS):
        start = rng.uniform(-radius, radius, size=d)
        state = _evaluate(target, start, needs_gradient)
        if state is None:
            continue
        if how == "optimise":
            return _optimised(target, state, needs_gradient)
        return state
    raise InitialisationError(
        f"the log density{' or its gradient' if needs_gradient else ''} was not finite at any of "
        f"{MAX_ATTEMPTS} random points drawn uniformly from [-{radius:g}, {radius:g}] in each "
        "unconstrained coordinate; check the priors, the data and the bounds, or give initial "
        "values"
    )


def _evaluate(target: Target, point: np.ndarray, needs_gradient: bool) -> State | None:
    if needs_gradient:
        value, gradient = density_and_gradient(target, point)
    else:
        value, gradient = density_only(target, point), np.zeros_like(point)
    if not np.isfinite(value):
        return None
    return State(point, value, gradient)


def _optimised(target: Target, start: State, needs_gradient: bool) -> State:
    def objective(u: np.ndarray) -> tuple[float, np.ndarray]:
        value, gradient = density_and_gradient(target, u)
        if not np.isfinite(value):
            # A large finite value makes the line search back off instead of failing outright.
            return 1e300, np.zeros_like(u)
        return -value, -gradient

    result = scipy.optimize.minimize(
        objective,
        start.position,
        jac=True,
        method="L-BFGS-B",
        options={"maxiter": OPTIMISER_ITERATIONS},
    )
    end = _evaluate(target, np.asarray(result.x, dtype=np.float64), needs_gradient)
    if end is None or end.log_density < start.log_density:
        return start
    return end
