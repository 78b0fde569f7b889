"""Distributions of the modeling engine, looked up by name and by which arguments are named."""

from __future__ import annotations

from collections.abc import Iterable

from . import continuous, discrete, multivariate
from .base import (
    SUPPORT_PHRASES,
    VARIATE_PHRASES,
    Distribution,
    support_holds,
)

__all__ = [
    "Distribution",
    "SUPPORT_PHRASES",
    "VARIATE_PHRASES",
    "distribution_names",
    "find_distribution",
    "parameterisations",
    "support_holds",
]

_CLASSES: list[type[Distribution]] = [
    continuous.Normal,
    continuous.StudentT,
    continuous.Cauchy,
    continuous.Laplace,
    continuous.Logistic,
    continuous.Lognormal,
    continuous.Exponential,
    continuous.Gamma,
    continuous.InverseGamma,
    continuous.Weibull,
    continuous.Beta,
    continuous.Uniform,
    continuous.HalfNormal,
    continuous.HalfCauchy,
    continuous.HalfStudentT,
    continuous.Gumbel,
    continuous.SkewNormal,
    multivariate.Dirichlet,
    multivariate.MultivariateNormal,
    multivariate.LkjCorrelationFactor,
    multivariate.WishartFactor,
    discrete.BernoulliProbability,
    discrete.BernoulliLogOdds,
    discrete.PoissonRate,
    discrete.PoissonLogRate,
    discrete.BinomialProbability,
    discrete.BinomialLogOdds,
    discrete.NegativeBinomialMean,
    discrete.NegativeBinomialLogMean,
    discrete.Categorical,
    discrete.CumulativeLogit,
    discrete.MultinomialProbability,
    discrete.MultinomialLogWeights,
    discrete.BetaBinomial,
    discrete.ZeroInflatedPoisson,
]

# one shared instance per (name, argument set): instances hold no state
_REGISTRY: dict[str, dict[frozenset[str], Distribution]] = {}
for _cls in _CLASSES:
    _REGISTRY.setdefault(_cls.name, {})[frozenset(_cls.arguments)] = _cls()


def distribution_names() -> list[str]:
    """Every distribution name, sorted."""
    return sorted(_REGISTRY)


def parameterisations(name: str) -> list[tuple[str, ...]]:
    """The argument tuples a distribution accepts, one per parameterisation."""
    return [d.arguments for d in _REGISTRY[name].values()]


def find_distribution(name: str, argument_names: Iterable[str]) -> Distribution:
    """The distribution `name` under the parameterisation given by exactly these argument names.

    Raises LookupError whose message lists the valid names or argument sets.
    """
    forms = _REGISTRY.get(name)
    if forms is None:
        raise LookupError(
            f"unknown distribution '{name}'; known distributions: {', '.join(distribution_names())}"
        )
    wanted = frozenset(argument_names)
    found = forms.get(wanted)
    if found is None:
        options = " or ".join(
            "(" + ", ".join(d.arguments) + ")" for d in forms.values()
        )
        given = ", ".join(sorted(wanted)) or "none"
        raise LookupError(
            f"distribution '{name}' takes the arguments {options}; got ({given})"
        )
    return found
