"""The normalised posterior of a model with one or two unconstrained coordinates, on a grid.

The density is evaluated on a rectangular grid over the unconstrained scale (log-Jacobians
included, so the integral there is the evidence p(y) and every moment is exact up to quadrature
error). Integrals use the trapezoidal rule, which converges geometrically for smooth densities
that decay at the ends (Trefethen & Weideman 2014, "The exponentially convergent trapezoidal
rule", SIAM Review 56, section 5), so doubling the resolution until the moments stop moving is a
sound stopping rule. The box starts at the mode plus and minus BOX_SDS standard deviations of the
Laplace curvature and widens, side by side, until the mass estimated beyond each side is below a
stated share of the total.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import integrate, interpolate

from .curvature import covariance_from_hessian, hessian
from .mode import find_mode

MAX_DIMENSION = 2
# Initial half-width of the box in Laplace standard deviations: a normal has mass 1.2e-15 beyond
# 8 sd; our choice, so that for near-normal posteriors the box rarely needs widening.
BOX_SDS = 8.0
# Mass allowed beyond the box, as a share of the total: our choice, far below the 1e-6 at which
# moments are compared, and it is the tolerance the result states.
OUTSIDE_TOLERANCE = 1e-10
# Resolution doubles until the mean and sd of every coordinate move by less than this share of
# the coordinate's sd; our choice (the quadrature error then sits well below it).
MOMENT_TOLERANCE = 1e-9
START_POINTS = 33
MAX_POINTS = {1: 4097, 2: 257}
MAX_WIDENINGS = 40


class GridTooLarge(ValueError):
    pass


class GridFailed(ValueError):
    """The density could not be bracketed or resolved; .reason says why."""


@dataclass
class GridResult:
    axes: list[np.ndarray]               # grid points per unconstrained coordinate
    log_density: np.ndarray              # unnormalised, on the grid (n0,) or (n0, n1)
    log_evidence: float                  # log of the integral over the unconstrained scale
    marginals: list[np.ndarray]          # normalised marginal density on each axis
    names: list[str]                     # quantity names reported at each point
    means: np.ndarray
    sds: np.ndarray
    quantiles: dict[float, np.ndarray]   # probability -> value per quantity
    draws: np.ndarray                    # (S, quantities), by inverse transform
    outside_mass: float                  # estimated share of mass beyond the box
    points: int                          # grid points evaluated in the final grid
    notes: list[str] = field(default_factory=list)


def _trapezoid_weights(axis: np.ndarray) -> np.ndarray:
    h = axis[1] - axis[0]
    w = np.full(axis.size, h)
    w[0] = w[-1] = h / 2
    return w


def _evaluate(model: Any, axes: list[np.ndarray]) -> np.ndarray:
    mesh = np.meshgrid(*axes, indexing="ij")
    flat = np.stack([m.ravel() for m in mesh], axis=1)
    values = np.array([model.log_density(u) for u in flat])
    return values.reshape(mesh[0].shape)


def _marginals(density: np.ndarray, axes: list[np.ndarray]) -> list[np.ndarray]:
    weights = [_trapezoid_weights(a) for a in axes]
    if len(axes) == 1:
        return [density]
    return [density @ weights[1], weights[0] @ density]


def _outside(marginal: np.ndarray, axis: np.ndarray, total: float) -> tuple[float, float]:
    """Mass beyond each end as a share of total, extrapolating the last two points' decay."""
    h = axis[1] - axis[0]
    shares = []
    for end, inner in ((marginal[0], marginal[1]), (marginal[-1], marginal[-2])):
        if end <= 0:
            shares.append(0.0)
        elif inner <= end:
            shares.append(np.inf)     # not decaying toward the edge: widen
        else:
            rate = np.log(inner / end) / h
            shares.append(end / rate / total)
    return shares[0], shares[1]


def _moments(density: np.ndarray, axes: list[np.ndarray], total: float) -> np.ndarray:
    out = []
    for marginal, axis in zip(_marginals(density, axes), axes, strict=True):
        w = _trapezoid_weights(axis) * marginal / total
        mean = float(np.sum(w * axis))
        out += [mean, float(np.sqrt(max(np.sum(w * (axis - mean) ** 2), 0.0)))]
    return np.array(out)


def _inverse_cdf(axis: np.ndarray, density: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Inverse of the cumulative trapezoid integral of density (rows of a batch, or one row)."""
    h = axis[1] - axis[0]
    density = np.atleast_2d(density)
    cells = 0.5 * h * (density[:, 1:] + density[:, :-1])
    cdf = np.concatenate([np.zeros((density.shape[0], 1)), np.cumsum(cells, axis=1)], axis=1)
    cdf /= cdf[:, -1:]
    u = np.broadcast_to(u, (density.shape[0],)) if density.shape[0] > 1 else np.atleast_1d(u)
    if density.shape[0] == 1:
        return np.interp(u, cdf[0], axis)
    index = np.clip(np.sum(cdf < u[:, None], axis=1) - 1, 0, axis.size - 2)
    rows = np.arange(density.shape[0])
    low, high = cdf[rows, index], cdf[rows, index + 1]
    share = np.where(high > low, (u - low) / np.where(high > low, high - low, 1.0), 0.5)
    return axis[index] + share * h


# Points per grid cell at which the marginal is interpolated for quantiles; our choice.
QUANTILE_REFINEMENT = 16


def _axis_quantiles(axis: np.ndarray, marginal: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Quantiles of one coordinate: the marginal interpolated by a cubic spline, integrated by
    cumulative Simpson's rule (both fourth order in the step), then the cdf inverted."""
    fine = np.linspace(axis[0], axis[-1], (axis.size - 1) * QUANTILE_REFINEMENT + 1)
    density = np.maximum(interpolate.CubicSpline(axis, marginal)(fine), 0.0)
    cdf = np.concatenate([[0.0], integrate.cumulative_simpson(density, x=fine)])
    cdf = np.maximum.accumulate(cdf) / cdf[-1]
    return np.interp(p, cdf, fine)


def _weighted_quantiles(values: np.ndarray, weights: np.ndarray, p: float) -> np.ndarray:
    """Quantiles of each column of values under point weights (midpoint rule on the sorted cdf)."""
    order = np.argsort(values, axis=0)
    sorted_values = np.take_along_axis(values, order, axis=0)
    sorted_weights = weights[order]
    cdf = np.cumsum(sorted_weights, axis=0) - 0.5 * sorted_weights
    return np.array([np.interp(p, cdf[:, j], sorted_values[:, j])
                     for j in range(values.shape[1])])


def grid_posterior(model: Any, rng: np.random.Generator, draws: int = 4000,
                   quantiles: tuple[float, ...] = (0.05, 0.5, 0.95)) -> GridResult:
    """The grid posterior of a model with at most two unconstrained coordinates.

    model: a CompiledModel (log_density, log_density_and_gradient, report, quantity_names).
    Raises GridTooLarge for more coordinates, GridFailed when the box cannot be closed.
    """
    d = model.dimension
    if d > MAX_DIMENSION or d < 1:
        raise GridTooLarge(f"a grid covers one or two unconstrained coordinates; this model "
                           f"has {d}")
    search = find_mode(model, rng)
    factored = covariance_from_hessian(hessian(model, search.mode))
    scale = np.ones(d) if factored is None else np.sqrt(np.diag(factored[0]))
    notes = list(search.disagreements)
    low = search.mode - BOX_SDS * scale
    high = search.mode + BOX_SDS * scale
    points = START_POINTS
    steps = (high - low) / (points - 1)
    for _ in range(MAX_WIDENINGS):
        axes = [np.linspace(low[k], high[k], int(round((high[k] - low[k]) / steps[k])) + 1)
                for k in range(d)]
        log_p = _evaluate(model, axes)
        top = np.max(log_p)
        if not np.isfinite(top):
            raise GridFailed("the log density is not finite anywhere on the grid")
        density = np.exp(log_p - top)
        weights = [_trapezoid_weights(a) for a in axes]
        total = float(density @ weights[0]) if d == 1 else float(weights[0] @ density @ weights[1])
        wider = False
        worst = 0.0
        for k, (marginal, axis) in enumerate(zip(_marginals(density, axes), axes, strict=True)):
            below, above = _outside(marginal, axis, total)
            worst = max(worst, below, above)
            width = high[k] - low[k]
            if below > OUTSIDE_TOLERANCE / (2 * d):
                low[k] -= 0.5 * width
                wider = True
            if above > OUTSIDE_TOLERANCE / (2 * d):
                high[k] += 0.5 * width
                wider = True
        if not wider:
            break
    else:
        raise GridFailed(f"the mass beyond the grid stays above {OUTSIDE_TOLERANCE:g} after "
                         f"{MAX_WIDENINGS} widenings: the posterior's tails are too heavy (or "
                         "improper) for a grid")
    outside = worst
    moments = _moments(density, axes, total)
    while True:
        sizes = [2 * a.size - 1 for a in axes]
        if max(sizes) > MAX_POINTS[d]:
            notes.append(f"resolution capped at {max(a.size for a in axes)} points per "
                         "coordinate before the moments settled")
            break
        finer = [np.linspace(a[0], a[-1], n) for a, n in zip(axes, sizes, strict=True)]
        log_p_finer = _evaluate(model, finer)
        top = np.max(log_p_finer)
        density_finer = np.exp(log_p_finer - top)
        w = [_trapezoid_weights(a) for a in finer]
        total_finer = (float(density_finer @ w[0]) if d == 1
                       else float(w[0] @ density_finer @ w[1]))
        moments_finer = _moments(density_finer, finer, total_finer)
        change = np.abs(moments_finer - moments)
        sds = np.repeat(moments_finer[1::2], 2)
        axes, log_p, density, total, moments = (finer, log_p_finer, density_finer, total_finer,
                                                moments_finer)
        if np.all(change <= MOMENT_TOLERANCE * sds):
            break
    weights = [_trapezoid_weights(a) for a in axes]
    point_weights = (weights[0] if d == 1 else np.outer(weights[0], weights[1])) * density / total
    mesh = np.meshgrid(*axes, indexing="ij")
    flat = np.stack([m.ravel() for m in mesh], axis=1)
    report_rng = np.random.default_rng(rng.integers(2 ** 63))
    values = np.array([model.report(u, report_rng) for u in flat]).reshape(flat.shape[0], -1)
    pw = point_weights.ravel()
    means = pw @ values
    sds = np.sqrt(np.maximum(pw @ (values - means) ** 2, 0.0))
    qs = {p: _weighted_quantiles(values, pw, p) for p in quantiles}
    marginals = [m / total for m in _marginals(density, axes)]
    if len(model.unknown_names) == d:
        # Every unknown is a scalar with a monotone increasing transform of its own coordinate
        # (drawyard's bounds transforms), so its quantiles are its coordinate's, mapped through;
        # the other columns keep the point-weight quantiles (accurate to about a grid step).
        probabilities = np.array(quantiles)
        coordinate = np.array([_axis_quantiles(a, m, probabilities)
                               for a, m in zip(axes, marginals, strict=True)])
        for i, p in enumerate(quantiles):
            row = model.report(coordinate[:, i], report_rng)
            qs[p][:d] = row[:d]
    else:
        notes.append("quantiles come from the grid's point weights, accurate to about one grid "
                     "step")
    sampled = _draw(axes, density, rng, draws)
    sampled_values = np.array([model.report(u, report_rng) for u in sampled]).reshape(draws, -1)
    return GridResult(axes, log_p, float(np.log(total) + np.max(log_p)), marginals,
                      list(model.quantity_names), means, sds, qs, sampled_values, outside,
                      int(flat.shape[0]), notes)


def _draw(axes: list[np.ndarray], density: np.ndarray, rng: np.random.Generator,
          count: int) -> np.ndarray:
    """Inverse-transform draws: the first coordinate from its marginal, the second from its
    conditional, linearly interpolated between the two grid rows around the first."""
    marginal = _marginals(density, axes)[0]
    first = _inverse_cdf(axes[0], marginal, rng.uniform(size=count))
    if len(axes) == 1:
        return first[:, None]
    h = axes[0][1] - axes[0][0]
    position = np.clip((first - axes[0][0]) / h, 0, axes[0].size - 1 - 1e-12)
    row = np.floor(position).astype(int)
    share = position - row
    conditional = (1 - share)[:, None] * density[row] + share[:, None] * density[row + 1]
    second = _inverse_cdf(axes[1], conditional, rng.uniform(size=count))
    return np.column_stack([first, second])
