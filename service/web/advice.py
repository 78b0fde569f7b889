"""Plain-words explanations and the usual remedies for each check of the quality verdict.

The thresholds and their meaning follow Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021),
"Rank-normalization, folding, and localization", sec. 4-5 (R-hat below 1.01, ESS above about 400),
and Betancourt (2016), arXiv:1604.00695 (E-BFMI); tree-depth saturation is Hoffman & Gelman
(2014), section 3 (the trajectory doubles until it turns or reaches the depth limit); Vehtari,
Simpson, Gelman, Yao & Gabry (2024), "Pareto smoothed importance sampling", for the Laplace check;
the remedies are common practice.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Advice:
    title: str
    meaning: str
    remedy: str


ADVICE: dict[str, Advice] = {
    "max_rhat": Advice(
        "The chains disagree (R-hat too high)",
        "Chains started in different places should end up describing the same distribution. "
        "Here they do not, so the draws are not yet a sample from the posterior.",
        "Look at the trace plot of each quantity named below: a chain stuck apart from the "
        "others, or chains drifting, shows where. Run a longer warm-up, give better initial "
        "values, or reparameterise the model; a posterior with several separate modes needs a "
        "different model or method.",
    ),
    "min_bulk_ess": Advice(
        "Too few effective draws for the centre (bulk ESS too low)",
        "Successive draws are strongly correlated, so the draws carry less information than "
        "their number suggests and means and medians are uncertain.",
        "Run longer (more draws), or reparameterise so the sampler moves more freely (for "
        "example the non-centred form of a hierarchical model).",
    ),
    "min_tail_ess": Advice(
        "Too few effective draws in the tails (tail ESS too low)",
        "The tails of the distribution are explored slowly, so the 5% and 95% quantiles and "
        "other tail summaries are uncertain.",
        "Run longer (more draws), or reparameterise; heavy tails often respond to a different "
        "scale for the quantity.",
    ),
    "max_divergences": Advice(
        "Divergent transitions",
        "The sampler's simulated trajectories broke down in some region of the posterior, "
        "usually where its curvature changes sharply; that region is under-explored, so the "
        "draws may be biased.",
        "Reparameterise (for a hierarchical model, the non-centred form), or raise the target "
        "acceptance (for example to 0.95) so the sampler takes smaller steps. The scatter plot "
        "marks the divergent draws: where they cluster is where the geometry is hard.",
    ),
    "wall_time_limit": Advice(
        "Stopped at the wall-time limit",
        "At least one chain ran out of time before its last draw, so the draws are partial and "
        "every diagnostic above describes a shorter run than the one asked for.",
        "Run the job again with fewer warm-up iterations or draws, or ask the operator for a "
        "higher DRAWYARD_CHAIN_TIME_LIMIT; a model that is slow per iteration may also gain from "
        "reparameterisation.",
    ),
    "min_ebfmi": Advice(
        "Low energy fraction of missing information (E-BFMI)",
        "Between trajectories the sampler's energy changes too little compared with its spread, "
        "so the chain moves slowly through the range of the posterior, especially its tails.",
        "Reparameterise, often the scale parameters of a hierarchical model; a longer warm-up "
        "seldom helps.",
    ),
    "pareto_k": Advice(
        "The Gaussian approximation does not fit well (Pareto k-hat too high)",
        "Importance weights of the true posterior against the Laplace approximation's Gaussian "
        "have a heavy tail: the posterior is skewed, bounded near its mass, or has several "
        "modes, so the Gaussian's draws misstate it.",
        "Below the job's k threshold, weight the draws by exp(log_weight) from the sampler "
        "statistics (or resample them by it); above it, run chains (NUTS) instead.",
    ),
    "mode_agreement": Advice(
        "The optimiser found more than one mode",
        "Starts of the mode search ended at different points, so the posterior may have several "
        "modes and a Gaussian at one of them misses the others' mass.",
        "Run chains, several of them from spread-out starts, and look at their trace plots.",
    ),
    "max_depth_saturation": Advice(
        "Trajectories cut short at the maximum tree depth",
        "In many iterations the sampler was still travelling when its trajectory reached the "
        "largest number of doublings allowed (the sampler setting maximum_tree_depth), so it "
        "stopped early. The draws are still valid, but each one moves less far than it should, "
        "successive draws are strongly correlated, and every iteration costs the most gradient "
        "evaluations allowed. This usually means the posterior's scales differ by orders of "
        "magnitude or its quantities are strongly correlated, for example regression "
        "coefficients of raw, collinear covariates.",
        "Put the quantities on comparable scales: centre and scale covariates (or decorrelate "
        "them), give unknowns units of similar size, or reparameterise. For strong correlations "
        'try the preconditioning "full". Raising maximum_tree_depth lets trajectories run longer '
        "but makes every iteration slower and seldom removes the cause.",
    ),
}

FALLBACK = Advice(
    "A check outside its threshold",
    "This check of the verdict was not met.",
    "Read the message below and the diagnostics before using these draws.",
)


def grouped_failures(verdict: dict[str, Any] | None) -> list[dict[str, Any]]:
    """Failed checks grouped by kind, in the order they first appear, with advice for each."""
    groups: dict[str, dict[str, Any]] = {}
    for failure in (verdict or {}).get("failed_checks", []):
        check = failure.get("check", "")
        group = groups.setdefault(
            check, {"check": check, "advice": ADVICE.get(check, FALLBACK), "failures": []}
        )
        group["failures"].append(failure)
    return list(groups.values())
