"""Fused term kernels against scipy.stats, the generic route, and finite differences.

External checks: scipy.stats.norm / halfnorm / bernoulli / binom / poisson / multivariate_normal
log densities and mass functions; scipy.optimize.approx_fprime (central differences, via
central_differences.py) for the gradients.
"""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from worker.modeling.distributions import find_distribution
from worker.modeling.graph import Graph
from worker.modeling.shapes import ValueType
from worker.modeling.term_kernels import (
    GenericTerm,
    HalfNormalFixedScale,
    LogOddsCountsData,
    MultivariateNormalFixedFactor,
    NormalFixedScale,
    NormalVaryingScale,
    PoissonLogRateData,
    term_kernel,
)

from .central_differences import assert_gradient_close, central_gradient

SETTINGS = settings(max_examples=40, deadline=None, derandomize=True)
SHAPES = st.sampled_from([(), (1,), (4,), (2, 3)])


def setup(shape, seed, scale_scalar):
    rng = np.random.default_rng(seed)
    graph = Graph()
    x = graph.leaf(ValueType("real", shape))
    location = graph.leaf(ValueType("real", () if rng.random() < 0.5 else shape))
    scale_value = rng.uniform(0.3, 3.0, size=() if scale_scalar else shape)
    scale = graph.constant(scale_value, "real")
    values = [None] * len(graph.nodes)
    values[x] = rng.normal(0, 2, size=shape) if shape else float(rng.normal(0, 2))
    values[location] = rng.normal(size=graph.type_of(location).shape)
    values[scale] = scale_value
    return rng, graph, x, location, scale, values


def gradient_of(kernel, values, node):
    adjoint = [None] * len(values)
    kernel.run(values, adjoint)
    return np.asarray(adjoint[node])


@SETTINGS
@given(shape=SHAPES, seed=st.integers(0, 2**32 - 1), scale_scalar=st.booleans())
def test_normal_fixed_scale(shape, seed, scale_scalar):
    rng, graph, x, location, scale, values = setup(shape, seed, scale_scalar)
    normal = find_distribution("normal", {"location", "scale"})
    kernel = term_kernel(x, normal, ("location", "scale"), (location, scale), graph)
    assert isinstance(kernel, NormalFixedScale)
    expected = stats.norm.logpdf(values[x], values[location], values[scale]).sum()
    assert np.isclose(kernel.value(values), expected, rtol=1e-12)
    adjoint = [None] * len(values)
    assert np.isclose(kernel.run(values, adjoint), expected, rtol=1e-12)
    generic = GenericTerm(x, normal, ("location", "scale"), (location, scale), graph)
    generic_adjoint = [None] * len(values)
    generic.run(values, generic_adjoint)
    for node in (x, location):
        def f(flat, node=node):
            trial = list(values)
            trial[node] = flat.reshape(np.shape(values[node]))
            return kernel.value(trial)
        numeric = central_gradient(f, np.ravel(values[node])).reshape(np.shape(values[node]))
        assert np.shape(adjoint[node]) == np.shape(values[node])
        assert_gradient_close(np.asarray(adjoint[node]), numeric, scale=abs(expected))
        np.testing.assert_allclose(adjoint[node], generic_adjoint[node], rtol=1e-12, atol=1e-14)


@SETTINGS
@given(shape=SHAPES, seed=st.integers(0, 2**32 - 1), scale_scalar=st.booleans())
def test_half_normal_fixed_scale(shape, seed, scale_scalar):
    rng, graph, x, _, scale, values = setup(shape, seed, scale_scalar)
    values[x] = np.abs(values[x])
    half = find_distribution("half_normal", {"scale"})
    kernel = term_kernel(x, half, ("scale",), (scale,), graph)
    assert isinstance(kernel, HalfNormalFixedScale)
    expected = stats.halfnorm.logpdf(values[x], scale=values[scale]).sum()
    assert np.isclose(kernel.value(values), expected, rtol=1e-12)
    g = gradient_of(kernel, values, x)
    numeric = central_gradient(
        lambda flat: kernel.value([flat.reshape(np.shape(values[x])) if i == x else v
                                   for i, v in enumerate(values)]),
        np.ravel(values[x]))
    assert_gradient_close(g, numeric.reshape(np.shape(values[x])), scale=abs(expected))
    negative = list(values)
    negative[x] = -np.abs(values[x]) - 0.1
    assert kernel.value(negative) == -np.inf


def test_half_normal_sign_check_only_when_needed():
    graph = Graph()
    x = graph.leaf(ValueType("real", (3,)))
    scale = graph.constant(np.asarray(2.0), "real")
    half = find_distribution("half_normal", {"scale"})
    assert term_kernel(x, half, ("scale",), (scale,), graph, sign_guaranteed=True).check_sign \
        is False
    assert term_kernel(x, half, ("scale",), (scale,), graph).check_sign is True


@SETTINGS
@given(n=st.integers(1, 30), seed=st.integers(0, 2**32 - 1), scalar_eta=st.booleans())
def test_bernoulli_and_poisson_on_data(n, seed, scalar_eta):
    rng = np.random.default_rng(seed)
    graph = Graph()
    y01 = (rng.random(n) < 0.4).astype(float)
    counts = rng.poisson(3.0, size=n).astype(float)
    y_node = graph.constant(y01, "integer")
    c_node = graph.constant(counts, "integer")
    eta = graph.leaf(ValueType("real", () if scalar_eta else (n,)))
    values = [None] * len(graph.nodes)
    values[y_node], values[c_node] = y01, counts
    values[eta] = rng.normal(0, 2, size=graph.type_of(eta).shape)

    bern = term_kernel(y_node, find_distribution("bernoulli", {"log_odds"}), ("log_odds",),
                       (eta,), graph)
    pois = term_kernel(c_node, find_distribution("poisson", {"log_rate"}), ("log_rate",),
                       (eta,), graph)
    assert isinstance(bern, LogOddsCountsData) and isinstance(pois, PoissonLogRateData)
    p = 1 / (1 + np.exp(-values[eta]))
    expected_b = stats.bernoulli.logpmf(y01, np.broadcast_to(p, (n,))).sum()
    expected_p = stats.poisson.logpmf(counts, np.broadcast_to(np.exp(values[eta]), (n,))).sum()
    assert np.isclose(bern.value(values), expected_b, rtol=1e-11)
    assert np.isclose(pois.value(values), expected_p, rtol=1e-11)
    for kernel, expected in ((bern, expected_b), (pois, expected_p)):
        g = gradient_of(kernel, values, eta)
        assert g.shape == np.shape(values[eta])

        def f(flat, kernel=kernel):
            trial = list(values)
            trial[eta] = flat.reshape(np.shape(values[eta]))
            return kernel.value(trial)

        numeric = central_gradient(f, np.ravel(values[eta])).reshape(g.shape)
        assert_gradient_close(g, numeric, scale=abs(expected))


def test_other_terms_take_the_generic_route():
    graph = Graph()
    x = graph.leaf(ValueType("real", (3,)))
    scale = graph.leaf(ValueType("real", ()))
    location = graph.constant(np.asarray(0.0), "real")
    laplace = find_distribution("laplace", {"location", "scale"})
    kernel = term_kernel(x, laplace, ("location", "scale"), (location, scale), graph)
    assert isinstance(kernel, GenericTerm)
    assert kernel.wrt == frozenset({"x", "scale"})


@SETTINGS
@given(shape=SHAPES, seed=st.integers(0, 2**32 - 1), scale_scalar=st.booleans(),
       location_scalar=st.booleans())
def test_normal_varying_scale(shape, seed, scale_scalar, location_scalar):
    """theta ~ normal(mu, tau), tau an unknown: against scipy.stats.norm and the generic route."""
    rng = np.random.default_rng(seed)
    graph = Graph()
    x = graph.leaf(ValueType("real", shape))
    location = graph.leaf(ValueType("real", () if location_scalar else shape))
    scale = graph.leaf(ValueType("real", () if scale_scalar else shape))
    values = [None] * len(graph.nodes)
    values[x] = rng.normal(0, 2, size=shape)
    values[location] = rng.normal(size=graph.type_of(location).shape)
    values[scale] = rng.uniform(0.3, 3.0, size=graph.type_of(scale).shape)
    normal = find_distribution("normal", {"location", "scale"})
    kernel = term_kernel(x, normal, ("location", "scale"), (location, scale), graph)
    assert isinstance(kernel, NormalVaryingScale)
    expected = stats.norm.logpdf(values[x], values[location], values[scale]).sum()
    assert np.isclose(kernel.value(values), expected, rtol=1e-12)
    adjoint = [None] * len(values)
    assert np.isclose(kernel.run(values, adjoint), expected, rtol=1e-12)
    generic = GenericTerm(x, normal, ("location", "scale"), (location, scale), graph)
    generic_adjoint = [None] * len(values)
    generic.run(values, generic_adjoint)
    for node in (x, location, scale):
        def f(flat, node=node):
            trial = list(values)
            trial[node] = flat.reshape(np.shape(values[node]))
            return kernel.value(trial)
        numeric = central_gradient(f, np.ravel(values[node])).reshape(np.shape(values[node]))
        assert np.shape(adjoint[node]) == np.shape(values[node])
        assert_gradient_close(np.asarray(adjoint[node]), numeric, scale=abs(expected))
        np.testing.assert_allclose(adjoint[node], generic_adjoint[node], rtol=1e-11, atol=1e-13)
    bad = list(values)
    bad[scale] = -np.abs(values[scale])
    assert kernel.value(bad) == -np.inf
    assert kernel.run(bad, [None] * len(values)) == -np.inf


def _eta_values(rng, n):
    """Log-odds over the whole range the fused kernel treats by sign: tails far beyond where
    exp(eta) overflows or underflows to 1, both signed zeros, and ordinary values."""
    eta = rng.normal(0, 3, size=n)
    eta[: min(n, 6)] = [-800.0, -37.0, -0.0, 0.0, 36.5, 745.0][: min(n, 6)]
    return eta


@SETTINGS
@given(n=st.integers(6, 40), seed=st.integers(0, 2**32 - 1))
def test_log_odds_kernels_at_extremes_against_scipy(n, seed):
    """Bernoulli and binomial on log-odds: value against scipy.stats (Bernoulli via the stable
    log-sigmoid of scipy.special), gradient y - n expit(eta) against scipy.special.expit, at
    log-odds where a naive softplus overflows."""
    from scipy.special import expit, gammaln, log_expit

    rng = np.random.default_rng(seed)
    eta_value = _eta_values(rng, n)
    trials = rng.integers(0, 12, size=n).astype(float)
    counts = np.floor(rng.random(n) * (trials + 1))
    y01 = (rng.random(n) < 0.5).astype(float)
    graph = Graph()
    y_node = graph.constant(y01, "integer")
    c_node = graph.constant(counts, "integer")
    t_node = graph.constant(trials, "integer")
    eta = graph.leaf(ValueType("real", (n,)))
    values = [None] * len(graph.nodes)
    values[y_node], values[c_node], values[t_node], values[eta] = y01, counts, trials, eta_value
    bern = term_kernel(y_node, find_distribution("bernoulli", {"log_odds"}), ("log_odds",),
                       (eta,), graph)
    binom = term_kernel(c_node, find_distribution("binomial", {"trials", "log_odds"}),
                        ("trials", "log_odds"), (t_node, eta), graph)
    assert isinstance(bern, LogOddsCountsData) and isinstance(binom, LogOddsCountsData)
    # log p(y) = y log expit(eta) + (1 - y) log expit(-eta), pointwise, in scipy's stable
    # log-sigmoid; it equals scipy.stats' mass functions wherever those are finite
    pointwise_b = y01 * log_expit(eta_value) + (1 - y01) * log_expit(-eta_value)
    pointwise_n = (gammaln(trials + 1) - gammaln(counts + 1) - gammaln(trials - counts + 1)
                   + counts * log_expit(eta_value) + (trials - counts) * log_expit(-eta_value))
    moderate = np.abs(eta_value) < 30
    p = expit(eta_value[moderate])
    np.testing.assert_allclose(stats.bernoulli.logpmf(y01[moderate], p), pointwise_b[moderate],
                               rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(stats.binom.logpmf(counts[moderate], trials[moderate], p),
                               pointwise_n[moderate], rtol=1e-10, atol=1e-12)
    assert np.isclose(bern.value(values), pointwise_b.sum(), rtol=1e-12)
    assert np.isclose(binom.value(values), pointwise_n.sum(), rtol=1e-12)
    for kernel, observed, n_trials in ((bern, y01, 1.0), (binom, counts, trials)):
        adjoint = [None] * len(values)
        total = kernel.run(values, adjoint)
        assert total == kernel.value(values)
        np.testing.assert_allclose(adjoint[eta], observed - n_trials * expit(eta_value),
                                   rtol=1e-13, atol=1e-15)


@SETTINGS
@given(n=st.integers(1, 25), seed=st.integers(0, 2**32 - 1))
def test_binomial_log_odds_gradient_by_differences(n, seed):
    rng = np.random.default_rng(seed)
    trials = rng.integers(1, 20, size=n).astype(float)
    counts = np.floor(rng.random(n) * (trials + 1))
    graph = Graph()
    c_node = graph.constant(counts, "integer")
    t_node = graph.constant(trials, "integer")
    eta = graph.leaf(ValueType("real", (n,)))
    values = [None] * len(graph.nodes)
    values[c_node], values[t_node], values[eta] = counts, trials, rng.normal(0, 2, size=n)
    kernel = term_kernel(c_node, find_distribution("binomial", {"trials", "log_odds"}),
                         ("trials", "log_odds"), (t_node, eta), graph)
    expected = stats.binom.logpmf(counts, trials, 1 / (1 + np.exp(-values[eta]))).sum()
    assert np.isclose(kernel.value(values), expected, rtol=1e-11)
    g = gradient_of(kernel, values, eta)
    numeric = central_gradient(
        lambda flat: kernel.value([flat if i == eta else v for i, v in enumerate(values)]),
        values[eta])
    assert_gradient_close(g, numeric, scale=abs(expected))


def test_binomial_counts_beyond_trials_take_the_generic_route():
    graph = Graph()
    c_node = graph.constant(np.array([3.0, 5.0]), "integer")
    t_node = graph.constant(np.array([4.0, 4.0]), "integer")
    eta = graph.leaf(ValueType("real", (2,)))
    kernel = term_kernel(c_node, find_distribution("binomial", {"trials", "log_odds"}),
                         ("trials", "log_odds"), (t_node, eta), graph)
    assert isinstance(kernel, GenericTerm)


@SETTINGS
@given(k=st.integers(1, 6), batch=st.sampled_from([None, 1, 3]), seed=st.integers(0, 2**32 - 1),
       location_unknown=st.booleans(), location_batched=st.booleans())
def test_multivariate_normal_fixed_factor(k, batch, seed, location_unknown, location_batched):
    """Against scipy.stats.multivariate_normal.logpdf, the generic route and finite differences."""
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(k, k))
    covariance = a @ a.T + k * np.eye(k)
    factor = np.linalg.cholesky(covariance)
    x_shape = (k,) if batch is None else (batch, k)
    location_shape = x_shape if location_batched else (k,)
    graph = Graph()
    x = graph.leaf(ValueType("real", x_shape))
    location_value = rng.normal(size=location_shape)
    location = (graph.leaf(ValueType("real", location_shape)) if location_unknown
                else graph.constant(location_value, "real"))
    # a factor with junk above its diagonal: the distribution reads only the lower triangle
    f_node = graph.constant(factor + np.triu(rng.normal(size=(k, k)), 1), "real")
    values = [None] * len(graph.nodes)
    values[x] = rng.normal(0, 2, size=x_shape)
    values[location] = location_value
    values[f_node] = graph.nodes[f_node].value
    mvn = find_distribution("multivariate_normal", {"location", "covariance_cholesky"})
    names, nodes = ("location", "covariance_cholesky"), (location, f_node)
    kernel = term_kernel(x, mvn, names, nodes, graph)
    assert isinstance(kernel, MultivariateNormalFixedFactor)
    expected = float(np.sum(stats.multivariate_normal.logpdf(
        values[x] - location_value, np.zeros(k), covariance)))
    assert np.isclose(kernel.value(values), expected, rtol=1e-11)
    adjoint = [None] * len(values)
    assert np.isclose(kernel.run(values, adjoint), expected, rtol=1e-11)
    generic = GenericTerm(x, mvn, names, nodes, graph)
    generic_adjoint = [None] * len(values)
    generic.run(values, generic_adjoint)
    for node in (x, location) if location_unknown else (x,):
        def f(flat, node=node):
            trial = list(values)
            trial[node] = flat.reshape(np.shape(values[node]))
            return kernel.value(trial)
        numeric = central_gradient(f, np.ravel(values[node])).reshape(np.shape(values[node]))
        assert np.shape(adjoint[node]) == np.shape(values[node])
        assert_gradient_close(np.asarray(adjoint[node]), numeric, scale=abs(expected))
        np.testing.assert_allclose(adjoint[node], generic_adjoint[node], rtol=1e-9, atol=1e-12)
    if not location_unknown:
        assert adjoint[location] is None


def test_multivariate_normal_with_a_factor_that_is_not_one_stays_generic():
    graph = Graph()
    x = graph.leaf(ValueType("real", (2,)))
    location = graph.constant(np.zeros(2), "real")
    f_node = graph.constant(np.array([[1.0, 0.0], [0.5, 0.0]]), "real")
    mvn = find_distribution("multivariate_normal", {"location", "covariance_cholesky"})
    kernel = term_kernel(x, mvn, ("location", "covariance_cholesky"), (location, f_node), graph)
    assert isinstance(kernel, GenericTerm)


@SETTINGS
@given(seed=st.integers(0, 2**32 - 1))
def test_buffers_carry_nothing_from_one_call_to_the_next(seed):
    """A kernel called at one point and then another gives at the second exactly what a new
    kernel gives there: the buffers it keeps hold no state between calls."""
    rng = np.random.default_rng(seed)
    n = 7
    graph = Graph()
    y_node = graph.constant((rng.random(n) < 0.5).astype(float), "integer")
    c_node = graph.constant(rng.poisson(2.0, size=n).astype(float), "integer")
    eta = graph.leaf(ValueType("real", (n,)))
    scale = graph.leaf(ValueType("real", ()))
    normal = find_distribution("normal", {"location", "scale"})
    fixed = graph.constant(rng.uniform(0.5, 2.0, size=n), "real")
    cases = [
        (y_node, find_distribution("bernoulli", {"log_odds"}), ("log_odds",), (eta,)),
        (c_node, find_distribution("poisson", {"log_rate"}), ("log_rate",), (eta,)),
        (eta, normal, ("location", "scale"), (y_node, fixed)),
        (c_node, normal, ("location", "scale"), (eta, scale)),
    ]
    first, second = ([None] * len(graph.nodes) for _ in range(2))
    for values in (first, second):
        for node in (y_node, c_node, fixed):
            values[node] = graph.nodes[node].value
        values[eta] = rng.normal(0, 2, size=n)
        values[scale] = np.float64(rng.uniform(0.5, 2.0))
    for variate, distribution, names, nodes in cases:
        reused = term_kernel(variate, distribution, names, nodes, graph)
        reused.run(first, [None] * len(first))
        reused.value(first)
        adjoint = [None] * len(second)
        total = reused.run(second, adjoint)
        fresh = term_kernel(variate, distribution, names, nodes, graph)
        fresh_adjoint = [None] * len(second)
        assert fresh.run(second, fresh_adjoint) == total
        for a, b in zip(adjoint, fresh_adjoint, strict=True):
            assert (a is None) == (b is None)
            if a is not None:
                assert np.array_equal(a, b)
