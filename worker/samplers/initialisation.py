"""Starting points on the unconstrained space where the log density and gradient are finite.

Random starts are independent normal draws on the unconstrained scale, N(0, spread^2) for every
coordinate. A normal has no preferred axes (the law of a start does not depend on how the
unknowns are laid out or rotated) and no edge, and its draws cluster at distance spread x sqrt(d)
from the origin, where the transforms to constrained supports map 0 to their middle (a scale of
1, a probability of 1/2). When a draw lands where the density is zero or not finite, another is
drawn; after every ATTEMPTS_PER_ROUND failures the spread is halved, so the later draws search
nearer the origin, where the transforms are least likely to overflow. ROUNDS rounds of
ATTEMPTS_PER_ROUND: a region holding a quarter of one round's draws is missed by all of them
with probability 0.75^16 = 1%, and halving three times reaches one eighth of the setting.
"""

from __future__ import annotations

import numpy as np
import scipy.optimize

from worker.samplers.hamiltonian import State
from worker.samplers.target import Target, density_and_gradient, density_only

ATTEMPTS_PER_ROUND = 16
ROUNDS = 4
OPTIMISER_ITERATIONS = 200


class InitialisationError(RuntimeError):
    """No usable starting point; ``reason`` says why in one plain sentence."""

    def __init__(self, reason: str):
        self.reason = reason
        super().__init__(reason)


def initial_state(
    target: Target,
    how: str,
    spread: float,
    rng: np.random.Generator,
    given: np.ndarray | None,
    needs_gradient: bool,
) -> State:
    """The chain's first state.

    ``how`` is "random" (normal draws with sd ``spread``, narrowing after failures: see the module
    docstring), "given" (``given`` as is), or "optimise" (a short L-BFGS-B run on the negative log
    density from a random start; the optimiser's end point is used when finite and at least as
    probable, otherwise its start). A user-given point overrides "random".
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
    for attempt in range(ROUNDS * ATTEMPTS_PER_ROUND):
        scale = spread * 0.5 ** (attempt // ATTEMPTS_PER_ROUND)
        state = _evaluate(target, scale * rng.standard_normal(d), needs_gradient)
        if state is None:
            continue
        if how == "optimise":
            return _optimised(target, state, needs_gradient)
        return state
    narrowest = spread * 0.5 ** (ROUNDS - 1)
    raise InitialisationError(
        f"no starting point found: at all {ROUNDS * ATTEMPTS_PER_ROUND} random points tried "
        f"(normal draws on the unconstrained scale, spread {spread:g} narrowing to "
        f"{narrowest:g}) the log density{' or its gradient' if needs_gradient else ''} was "
        "infinite or undefined. Usual causes: data outside a distribution's support, bounds or "
        "priors that leave no value possible, or an expression that overflows. Check those, or "
        "supply initial values with initialisation 'given', or try a smaller start_spread"
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
