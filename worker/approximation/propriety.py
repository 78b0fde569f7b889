"""Whether a spec's prior is a normalised density, which the marginal likelihood requires.

The evidence p(y) = integral of p(y | theta) p(theta) is only defined, and only comparable
between models, when p(theta) integrates to one (Gronau et al. 2017, "A tutorial on bridge
sampling", section 2; Kass & Raftery 1995 on improper priors and Bayes factors). drawyard's log
density is exactly normalised term by term when every unknown carries exactly one prior term whose
distribution's support is the unknown's declared support; anything else is reported here:
- `flat_prior: true` (a constant density on an unbounded or half-bounded space is improper);
- a prior term on a derived quantity (it multiplies an unnormalised factor into the unknowns'
  density, with no Jacobian);
- two or more prior terms on one unknown (a product of densities is not normalised);
- a prior whose support is larger than the declared bounds (a normal on an unknown with
  lower: 0 is truncated, and its lost mass is not accounted for), or an ordered structure
  (iid terms on a sorted vector integrate to 1/K!, not 1, and we do not claim that correction).
"""

from __future__ import annotations

from typing import Any

from ..modeling.distributions import find_distribution
from ..problems import Problem, pointer

POSITIVE_KINDS = ("positive", "nonnegative")


def _number(value: Any) -> float | None:
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) else None


def _supports_match(declared: dict, kind: str, arguments: dict) -> bool:
    lower, upper = declared.get("lower"), declared.get("upper")
    structure = declared.get("structure")
    if structure is not None:
        # A structured unknown's own distribution has the structure's name as its variate kind
        # (the simplex's and the correlation factor's; check_model insists on the pairing); no
        # distribution is of kind "ordered", so an ordered structure is never normalised here.
        return kind == structure
    if lower is None and upper is None:
        return kind == "real"
    if lower == 0 and upper is None:
        return kind in POSITIVE_KINDS
    if lower == 0 and upper == 1 and kind == "unit":
        return True
    if kind == "interval" and lower is not None and upper is not None:
        return (_number(arguments.get("lower")) == float(lower)
                and _number(arguments.get("upper")) == float(upper))
    return False


def improper_prior_problems(spec: dict) -> list[Problem]:
    """Every reason the spec's prior is not a normalised density (empty when it is), for a
    spec that has already passed check_model."""
    problems: list[Problem] = []
    unknowns: dict[str, dict] = spec.get("unknowns", {})
    terms: dict[str, list[int]] = {name: [] for name in unknowns}
    for i, item in enumerate(spec.get("priors", [])):
        target = item["on"]
        if target in terms:
            terms[target].append(i)
        else:
            problems.append(Problem(pointer("model", "priors", i, "on"),
                                    f"prior term {i + 1} is on the derived quantity '{target}', "
                                    "which leaves the prior of the unknowns behind it "
                                    "unnormalised"))
    for name, declared in unknowns.items():
        at = pointer("model", "unknowns", name)
        if declared.get("flat_prior", False):
            problems.append(Problem(pointer("model", "unknowns", name, "flat_prior"),
                                    f"unknown '{name}' has a flat prior, which is improper"))
            continue
        if len(terms[name]) > 1:
            numbers = ", ".join(str(i + 1) for i in terms[name])
            problems.append(Problem(at, f"unknown '{name}' has {len(terms[name])} prior terms "
                                        f"({numbers}); their product is not a normalised density"))
            continue
        if not terms[name]:
            continue  # covered through a derived quantity, reported above
        i = terms[name][0]
        item = spec["priors"][i]
        distribution = find_distribution(item["distribution"], set(item["arguments"]))
        if not _supports_match(declared, distribution.variate_kind, item["arguments"]):
            problems.append(Problem(pointer("model", "priors", i, "distribution"),
                                    f"the {distribution.name} prior on '{name}' does not have "
                                    "exactly the support the unknown is declared with, so it is "
                                    "truncated and not normalised"))
    return problems
