"""Log densities against scipy.stats (or a published formula), and exact gradients against central
finite differences, over hypothesis-drawn shapes (with broadcasting) and values.

Sources: scipy.stats log densities and mass functions (the reference library named in
../shared/REFERENCES.md); the proportional-odds formula of McCullagh (1980), Regression models for
ordinal data, JRSS B 42(2), section 2 (from memory); the LKJ density on Cholesky factors of
Lewandowski, Kurowicka & Joe (2009), Generating random correlation matrices based on vines and
extended onion method, J. Multivariate Analysis 100(9), section 3.2 (from memory). Central
differences are built from scipy.optimize.approx_fprime with steps +h and -h.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import hypothesis.extra.numpy as hnp
import numpy as np
import pytest
import scipy.stats as st
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as hs
from scipy.optimize import approx_fprime
from scipy.special import expit, softmax

from worker.modeling.distributions import find_distribution
from worker.modeling.transforms import make_transform

SETTINGS = settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow], derandomize=True
)

# Sub-shapes each batch shape may be broadcast from: scalars, leading and trailing singletons.
SUB_SHAPES = {(): [()], (4,): [(), (1,), (4,)], (2, 3): [(), (3,), (1, 3), (2, 1), (2, 3)]}


def floats(data, lo: float, hi: float, shape: tuple[int, ...]) -> np.ndarray:
    return data.draw(hnp.arrays(np.float64, shape, elements=hs.floats(lo, hi)))


def integers(data, lo: int, hi: int, shape: tuple[int, ...]) -> np.ndarray:
    return data.draw(hnp.arrays(np.int64, shape, elements=hs.integers(lo, hi)))


def sub_shape(data, batch: tuple[int, ...]) -> tuple[int, ...]:
    return data.draw(hs.sampled_from(SUB_SHAPES[batch]))


RANGES = {
    "real": (-3.0, 3.0),
    "positive": (0.3, 4.0),
    "shape_like": (0.6, 6.0),
    "unit": (0.05, 0.95),
    "dof": (0.8, 30.0),
}


@dataclass
class Case:
    """How to draw a point for one parameterisation and how scipy (or a formula) scores it."""

    name: str
    args: dict[str, str]                       # argument -> range key in RANGES (scalar events)
    variate: Callable                          # (data, shape, args) -> x
    reference: Callable                        # (x, args) -> pointwise log density
    draw: Callable | None = None               # custom (data, batch) -> (x, args) for event cases
    no_gradient: frozenset[str] = field(default_factory=frozenset)


def x_floats(lo, hi):
    return lambda data, shape, args: floats(data, lo, hi, shape)


def x_ints(lo, hi):
    return lambda data, shape, args: integers(data, lo, hi, shape)


def x_uniform(data, shape, args):
    # strictly inside (lower, upper) so finite differences stay in the support
    t = floats(data, 0.05, 0.95, shape)
    return args["lower"] + t * (args["upper"] - args["lower"])


def x_binomial(data, shape, args):
    t = floats(data, 0.0, 1.0, np.broadcast_shapes(shape, np.shape(args["trials"])))
    return np.floor(t * (args["trials"] + 0.999)).astype(np.int64)


def x_gumbel(data, shape, args):
    # standardised values in [-2.5, 6]: further left exp(-z) makes the sum so large that finite
    # differences lose the small components to rounding
    full = np.broadcast_shapes(shape, np.shape(args["location"]), np.shape(args["scale"]))
    return args["location"] + args["scale"] * floats(data, -2.5, 6.0, full)


def draw_uniform_args(data, batch):
    lower = floats(data, -3.0, 3.0, sub_shape(data, batch))
    width = floats(data, 0.2, 4.0, sub_shape(data, batch))
    return {"lower": lower, "upper": lower + width}


def draw_dirichlet(data, batch):
    k = data.draw(hs.integers(2, 4))
    raw = floats(data, 0.05, 1.0, sub_shape(data, batch) + (k,))
    x = raw / raw.sum(axis=-1, keepdims=True)
    return x, {"concentration": floats(data, 0.3, 5.0, sub_shape(data, batch) + (k,))}


def draw_lower_factor(data, shape, k):
    lower = np.tril(floats(data, -1.0, 1.0, shape + (k, k)), -1)
    diagonal = floats(data, 0.5, 2.0, shape + (k,))
    return lower + diagonal[..., None] * np.eye(k)


def draw_mvn(data, batch):
    k = data.draw(hs.integers(1, 3))
    x = floats(data, -3.0, 3.0, sub_shape(data, batch) + (k,))
    loc = floats(data, -2.0, 2.0, sub_shape(data, batch) + (k,))
    chol = draw_lower_factor(data, sub_shape(data, batch), k)
    return x, {"location": loc, "covariance_cholesky": chol}


def draw_lkj(data, batch, shape=None):
    k = data.draw(hs.integers(2, 4))
    shape = sub_shape(data, batch) if shape is None else shape
    transform = make_transform([k, k], structure="correlation_factor")
    u = floats(data, -1.5, 1.5, shape + (transform.dimension,)).reshape(-1, transform.dimension)
    x = np.stack([transform.constrain(row) for row in u]).reshape(shape + (k, k))
    return x, {"concentration": floats(data, 0.3, 5.0, sub_shape(data, batch))}


def draw_categorical(data, batch):
    k = data.draw(hs.integers(2, 5))
    return (
        integers(data, 1, k, sub_shape(data, batch)),
        {"log_weights": floats(data, -3.0, 3.0, sub_shape(data, batch) + (k,))},
    )


def draw_cumulative_logit(data, batch):
    k = data.draw(hs.integers(1, 4))
    start = floats(data, -3.0, 0.0, sub_shape(data, batch) + (1,))
    # increments of at least 0.1 keep finite-difference steps from reordering the cutpoints
    steps = floats(data, 0.1, 1.5, start.shape[:-1] + (k - 1,))
    cutpoints = np.concatenate([start, start + np.cumsum(steps, axis=-1)], axis=-1)
    return (
        integers(data, 1, k + 1, sub_shape(data, batch)),
        {"predictor": floats(data, -3.0, 3.0, sub_shape(data, batch)), "cutpoints": cutpoints},
    )


def ref_categorical(x, a):
    w = a["log_weights"]
    k = w.shape[-1]
    batch = np.broadcast_shapes(x.shape, w.shape[:-1])
    onehot = (np.broadcast_to(x, batch)[..., None] == np.arange(1, k + 1)).astype(int)
    p = softmax(np.broadcast_to(w, batch + (k,)), axis=-1)
    return st.multinomial.logpmf(onehot.reshape(-1, k), 1, p.reshape(-1, k)).reshape(batch)


def ref_cumulative_logit(x, a):
    # McCullagh (1980): P(y = k) = F(eta - c_{k-1}) - F(eta - c_k), F logistic, c_0 = -inf,
    # c_{K+1} = +inf; computed naively here on purpose
    c = a["cutpoints"]
    k = c.shape[-1]
    batch = np.broadcast_shapes(x.shape, a["predictor"].shape, c.shape[:-1])
    pad = np.concatenate(
        [np.full(c.shape[:-1] + (1,), -np.inf), c, np.full(c.shape[:-1] + (1,), np.inf)], axis=-1
    )
    pad = np.broadcast_to(pad, batch + (k + 2,))
    y = np.broadcast_to(x, batch)[..., None]
    low = np.take_along_axis(pad, y - 1, -1)[..., 0]
    high = np.take_along_axis(pad, y, -1)[..., 0]
    eta = a["predictor"]
    return np.log(expit(eta - low) - expit(eta - high))


def ref_per_event(make_frozen, event_ndim):
    """scipy's multivariate densities take one parameter set at a time: loop over the batch."""

    def reference(x, a):
        names = list(a)
        arrays = [np.asarray(a[n]) for n in names]
        dims = {"location": 1, "covariance_cholesky": 2, "concentration": 1}
        batch = np.broadcast_shapes(
            x.shape[: x.ndim - event_ndim],
            *[v.shape[: v.ndim - dims[n]] for n, v in zip(names, arrays, strict=True)],
        )
        out = np.empty(batch)
        for index in np.ndindex(batch):
            xi = np.broadcast_to(x, batch + x.shape[x.ndim - event_ndim :])[index]
            ai = {
                n: np.broadcast_to(v, batch + v.shape[v.ndim - dims[n] :])[index]
                for n, v in zip(names, arrays, strict=True)
            }
            out[index] = make_frozen(ai).logpdf(xi)
        return out

    return reference


CASES = [
    Case("normal", {"location": "real", "scale": "positive"}, x_floats(-5, 5),
         lambda x, a: st.norm.logpdf(x, a["location"], a["scale"])),
    Case("student_t", {"degrees_of_freedom": "dof", "location": "real", "scale": "positive"},
         x_floats(-5, 5),
         lambda x, a: st.t.logpdf(x, a["degrees_of_freedom"], a["location"], a["scale"])),
    Case("cauchy", {"location": "real", "scale": "positive"}, x_floats(-5, 5),
         lambda x, a: st.cauchy.logpdf(x, a["location"], a["scale"])),
    Case("laplace", {"location": "real", "scale": "positive"}, x_floats(-5, 5),
         lambda x, a: st.laplace.logpdf(x, a["location"], a["scale"])),
    Case("logistic", {"location": "real", "scale": "positive"}, x_floats(-5, 5),
         lambda x, a: st.logistic.logpdf(x, a["location"], a["scale"])),
    Case("lognormal", {"log_location": "real", "log_scale": "positive"}, x_floats(0.05, 8),
         lambda x, a: st.lognorm.logpdf(x, a["log_scale"], scale=np.exp(a["log_location"]))),
    Case("exponential", {"rate": "positive"}, x_floats(0.01, 6),
         lambda x, a: st.expon.logpdf(x, scale=1.0 / a["rate"])),
    Case("gamma", {"shape": "shape_like", "rate": "positive"}, x_floats(0.05, 8),
         lambda x, a: st.gamma.logpdf(x, a["shape"], scale=1.0 / a["rate"])),
    Case("inverse_gamma", {"shape": "shape_like", "scale": "positive"}, x_floats(0.05, 8),
         lambda x, a: st.invgamma.logpdf(x, a["shape"], scale=a["scale"])),
    Case("weibull", {"shape": "shape_like", "scale": "positive"}, x_floats(0.05, 8),
         lambda x, a: st.weibull_min.logpdf(x, a["shape"], scale=a["scale"])),
    Case("beta", {"a": "shape_like", "b": "shape_like"}, x_floats(0.02, 0.98),
         lambda x, a: st.beta.logpdf(x, a["a"], a["b"])),
    Case("uniform", {}, x_uniform,
         lambda x, a: st.uniform.logpdf(x, a["lower"], a["upper"] - a["lower"]),
         draw=lambda data, batch: (None, draw_uniform_args(data, batch))),
    Case("half_normal", {"scale": "positive"}, x_floats(0.01, 6),
         lambda x, a: st.halfnorm.logpdf(x, scale=a["scale"])),
    Case("half_cauchy", {"scale": "positive"}, x_floats(0.01, 6),
         lambda x, a: st.halfcauchy.logpdf(x, scale=a["scale"])),
    # the half-t is the t folded at zero: twice scipy.stats.t's density on x >= 0
    Case("half_student_t", {"degrees_of_freedom": "dof", "scale": "positive"}, x_floats(0.01, 6),
         lambda x, a: np.log(2.0) + st.t.logpdf(x, a["degrees_of_freedom"], 0.0, a["scale"])),
    Case("bernoulli", {"probability": "unit"}, x_ints(0, 1),
         lambda x, a: st.bernoulli.logpmf(x, a["probability"])),
    Case("bernoulli", {"log_odds": "real"}, x_ints(0, 1),
         lambda x, a: st.bernoulli.logpmf(x, expit(a["log_odds"]))),
    Case("binomial", {"probability": "unit"}, x_binomial,
         lambda x, a: st.binom.logpmf(x, a["trials"], a["probability"]),
         no_gradient=frozenset({"trials"})),
    Case("binomial", {"log_odds": "real"}, x_binomial,
         lambda x, a: st.binom.logpmf(x, a["trials"], expit(a["log_odds"])),
         no_gradient=frozenset({"trials"})),
    Case("poisson", {"rate": "positive"}, x_ints(0, 12),
         lambda x, a: st.poisson.logpmf(x, a["rate"])),
    Case("poisson", {"log_rate": "real"}, x_ints(0, 12),
         lambda x, a: st.poisson.logpmf(x, np.exp(a["log_rate"]))),
    # scipy's nbinom(n, p) with n = dispersion, p = dispersion / (mean + dispersion)
    Case("negative_binomial", {"mean": "positive", "dispersion": "positive"}, x_ints(0, 15),
         lambda x, a: st.nbinom.logpmf(
             x, a["dispersion"], a["dispersion"] / (a["mean"] + a["dispersion"]))),
    Case("negative_binomial", {"log_mean": "real", "dispersion": "positive"}, x_ints(0, 15),
         lambda x, a: st.nbinom.logpmf(
             x, a["dispersion"], a["dispersion"] / (np.exp(a["log_mean"]) + a["dispersion"]))),
    Case("gumbel", {"location": "real", "scale": "positive"}, x_gumbel,
         lambda x, a: st.gumbel_r.logpdf(x, a["location"], a["scale"])),
    Case("skew_normal", {"location": "real", "scale": "positive", "shape": "real"},
         x_floats(-5, 5),
         lambda x, a: st.skewnorm.logpdf(x, a["shape"], a["location"], a["scale"])),
    Case("beta_binomial", {"a": "positive", "b": "positive"}, x_binomial,
         lambda x, a: st.betabinom.logpmf(x, a["trials"], a["a"], a["b"]),
         no_gradient=frozenset({"trials"})),
    # a zero with probability pi, else Poisson (Lambert 1992), from scipy.stats.poisson
    Case("zero_inflated_poisson", {"zero_probability": "unit", "rate": "positive"},
         x_ints(0, 6),
         lambda x, a: np.log(np.where(x == 0, a["zero_probability"], 0.0)
                             + (1 - a["zero_probability"]) * st.poisson.pmf(x, a["rate"]))),
    Case("categorical", {}, None, ref_categorical, draw=draw_categorical),
    Case("cumulative_logit", {}, None, ref_cumulative_logit, draw=draw_cumulative_logit),
    Case("dirichlet", {}, None,
         ref_per_event(lambda a: st.dirichlet(a["concentration"]), 1), draw=draw_dirichlet),
    Case("multivariate_normal", {}, None,
         ref_per_event(lambda a: st.multivariate_normal(
             a["location"], a["covariance_cholesky"] @ a["covariance_cholesky"].T), 1),
         draw=draw_mvn),
]


def case_id(case: Case) -> str:
    return case.name + "".join("-" + a for a in sorted(case.args))


def draw_point(data, case: Case):
    batch = data.draw(hs.sampled_from(list(SUB_SHAPES)))
    if case.draw is not None:
        x, args = case.draw(data, batch)
    else:
        args = {
            n: floats(data, *RANGES[kind], sub_shape(data, batch)) for n, kind in case.args.items()
        }
        x = None
    if case.name in ("binomial", "beta_binomial"):
        args["trials"] = integers(data, 0, 20, sub_shape(data, batch))
    if x is None:
        x = case.variate(data, sub_shape(data, batch), args)
    return x, args


def relative_error(ours: np.ndarray, reference: np.ndarray) -> float:
    """|ours - reference| / max(|reference|, 1): relative error, read as absolute error for values
    of magnitude below one (where both implementations' cancellation dominates)."""
    ours, reference = np.broadcast_arrays(np.asarray(ours, float), np.asarray(reference, float))
    if ours.size == 0:
        return 0.0
    return float(np.max(np.abs(ours - reference) / np.maximum(np.abs(reference), 1.0)))


@pytest.mark.parametrize("case", CASES, ids=case_id)
@SETTINGS
@given(data=hs.data())
def test_log_density_matches_reference(case: Case, data) -> None:
    x, args = draw_point(data, case)
    dist = find_distribution(case.name, set(args))
    ours = dist.log_density(x, args)
    reference = case.reference(x, args)
    assert ours.shape == np.shape(reference)
    assert relative_error(ours, reference) < 1e-10


def central_difference(f: Callable[[np.ndarray], float], v: np.ndarray, h: float) -> np.ndarray:
    """Average of forward and backward differences from scipy.optimize.approx_fprime."""
    return 0.5 * (approx_fprime(v, f, h) + approx_fprime(v, f, -h))


def check_gradient(dist, x, args, key: str, analytic: np.ndarray) -> None:
    base = x if key == "x" else args[key]
    base = np.asarray(base, dtype=float)
    assert np.shape(analytic) == base.shape, (key, np.shape(analytic), base.shape)

    def total(v: np.ndarray) -> float:
        moved = v.reshape(base.shape)
        if key == "x":
            return float(np.sum(dist.log_density(moved, args)))
        return float(np.sum(dist.log_density(x, {**args, key: moved})))

    if base.size == 0:
        return
    numeric = central_difference(total, base.ravel().copy(), 1e-6)
    scale = np.maximum(np.abs(numeric), 1.0)
    assert np.max(np.abs(np.ravel(analytic) - numeric) / scale) < 2e-6, key


GRADIENT_CASES = [c for c in CASES if c.name not in ("dirichlet",)]


@pytest.mark.parametrize("case", GRADIENT_CASES, ids=case_id)
@SETTINGS
@given(data=hs.data())
def test_gradients_match_central_differences(case: Case, data) -> None:
    x, args = draw_point(data, case)
    if case.name == "laplace":
        # |x - location| has a kink at 0 where no derivative exists, and a central difference
        # straddling it averages the two sides (common practice: test smooth points only).
        assume(np.all(np.abs(np.asarray(x) - np.asarray(args["location"])) > 1e-3))
    dist = find_distribution(case.name, set(args))
    keys = [k for k in args if k not in case.no_gradient and k != "trials"]
    wrt = frozenset(keys + ([] if dist.discrete else ["x"]))
    values, grads = dist.log_density_and_gradients(x, args, wrt)
    np.testing.assert_allclose(values, dist.log_density(x, args), rtol=1e-14, atol=1e-14)
    assert set(grads) == set(wrt)
    for key in wrt:
        check_gradient(dist, x, args, key, grads[key])


@SETTINGS
@given(data=hs.data())
def test_dirichlet_gradients(data) -> None:
    """Concentration by central differences; x along the simplex through the stick-breaking map,
    since a perturbation of x off the simplex leaves the support."""
    x, args = draw_dirichlet(data, ())
    dist = find_distribution("dirichlet", {"concentration"})
    _, grads = dist.log_density_and_gradients(x, args, frozenset({"x", "concentration"}))
    check_gradient(dist, x, args, "concentration", grads["concentration"])
    transform = make_transform(x.shape, structure="simplex")
    u = transform.unconstrain(x)
    chained = transform.constrain_vjp(u, grads["x"])
    numeric = central_difference(
        lambda v: float(dist.log_density(transform.constrain(v), args)), u, 1e-6
    )
    np.testing.assert_allclose(chained, numeric, rtol=2e-6, atol=2e-6)


@SETTINGS
@given(data=hs.data())
def test_lkj_against_published_formula(data) -> None:
    """Differences of log densities equal sum_{k=2}^K (K - k + 2 eta - 2) (log L_kk - log L'_kk)
    (LKJ 2009; the density on the Cholesky factor). The normaliser is checked by integration in
    test_distributions_support.py."""
    x, _ = draw_lkj(data, (), shape=(4,))
    k = x.shape[-1]
    eta = data.draw(hs.floats(0.3, 5.0))         # one concentration: the normaliser cancels
    dist = find_distribution("lkj_correlation_factor", {"concentration"})
    ours = dist.log_density(x, {"concentration": eta})
    power = (k - np.arange(2, k + 1)) + 2.0 * eta - 2.0
    formula = np.sum(power * np.log(np.diagonal(x, axis1=-2, axis2=-1)[..., 1:]), axis=-1)
    np.testing.assert_allclose(ours - ours[0], formula - formula[0], rtol=1e-10, atol=1e-10)


@SETTINGS
@given(data=hs.data())
def test_lkj_gradients(data) -> None:
    """Concentration by central differences; the factor through the Cholesky-correlation map."""
    x, args = draw_lkj(data, ())
    dist = find_distribution("lkj_correlation_factor", {"concentration"})
    _, grads = dist.log_density_and_gradients(x, args, frozenset({"x", "concentration"}))
    check_gradient(dist, x, args, "concentration", grads["concentration"])
    transform = make_transform(x.shape, structure="correlation_factor")
    u = transform.unconstrain(x)
    chained = transform.constrain_vjp(u, grads["x"])
    numeric = central_difference(
        lambda v: float(dist.log_density(transform.constrain(v), args)), u, 1e-6
    )
    np.testing.assert_allclose(chained, numeric, rtol=2e-6, atol=2e-6)


@pytest.mark.parametrize("batched", [False, True])
def test_cumulative_logit_cutpoint_gradient_on_many_rows(batched: bool) -> None:
    """The shared-cutpoint path (one bincount) and the per-row path agree with differences."""
    rng = np.random.default_rng(7)
    n = 200
    cutpoints = np.array([-1.0, 0.2, 1.5])
    args = {"predictor": rng.normal(size=n), "cutpoints": cutpoints}
    if batched:
        args["cutpoints"] = np.tile(cutpoints, (n, 1))
    x = rng.integers(1, 5, size=n)
    dist = find_distribution("cumulative_logit", set(args))
    _, grads = dist.log_density_and_gradients(x, args, frozenset({"predictor", "cutpoints"}))
    check_gradient(dist, x, args, "cutpoints", grads["cutpoints"])
    check_gradient(dist, x, args, "predictor", grads["predictor"])
