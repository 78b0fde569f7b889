"""Gibbs updates of integer unknowns: each drawn exactly from its full conditional.

Geman & Geman (1984); Gelfand & Smith (1990). The log weights come from the compiled model's
conditionals (worker/modeling/conditionals.py); this module only draws from them. An update that
draws from the full conditional leaves the joint posterior invariant whatever else the
iteration does, so composing it with a continuous step that holds the integers is again a valid
Markov chain step (the compound step of worker/samplers/compound.py).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from worker.modeling.conditionals import Conditional


def draw_columns(log_weights: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One index per column of ``log_weights`` (values x elements), drawn with probabilities
    proportional to exp(column), by inverting the cumulative sum with one uniform per column.
    A column with no finite weight gets -1 (the caller keeps the element's value)."""
    top = log_weights.max(axis=0)
    finite = np.isfinite(top)
    weights = np.exp(log_weights - np.where(finite, top, 0.0))
    cumulative = np.cumsum(weights, axis=0)
    uniforms = rng.random(log_weights.shape[1]) * cumulative[-1]
    # the first value whose cumulative weight exceeds the uniform; zero weights are never taken
    chosen = np.count_nonzero(cumulative <= uniforms, axis=0)
    chosen = np.minimum(chosen, log_weights.shape[0] - 1)
    return np.where(finite, chosen, -1)


class GibbsSweep:
    """Every integer unknown once per sweep, in an order drawn from the chain's generator."""

    def __init__(self, conditionals: Sequence[Conditional]):
        self.conditionals = list(conditionals)

    def sweep(self, point: np.ndarray, rng: np.random.Generator) -> int:
        """Update the integer values of ``point`` in place; the number of values that changed."""
        changed = 0
        for b in rng.permutation(len(self.conditionals)):
            conditional = self.conditionals[b]
            block = conditional.block
            if block.independent:
                chosen = draw_columns(conditional.log_weights(point), rng)
                current = point[block.start:block.stop]
                new = np.where(chosen >= 0, block.lower + chosen, current)
                changed += int(np.count_nonzero(new != current))
                point[block.start:block.stop] = new
                continue
            # Coupled elements: one at a time, each given the others' newest values.
            for e in rng.permutation(block.size):
                weights = conditional.element_log_weights(point, int(e))
                chosen = int(draw_columns(weights[:, None], rng)[0])
                if chosen >= 0 and point[block.start + e] != block.lower + chosen:
                    point[block.start + e] = block.lower + chosen
                    changed += 1
        return changed
