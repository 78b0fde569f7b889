"""Fused term kernels against scipy.stats, the generic route, and finite differences.

External checks: scipy.stats.norm / halfnorm / bernoulli / poisson log densities and mass functions;
scipy.optimize.approx_fprime (central differences) for the gradients.
"""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from worker.modeling.distributions import find_distribution
from worker.modeling.graph import Graph
from worker.modeling.shapes import ValueType
from worker.modeling.term_kernels import (
    BernoulliLogOddsData,
    GenericTerm,
    HalfNormalFixedScale,
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
    assert isinstance(bern, BernoulliLogOddsData) and isinstance(pois, PoissonLogRateData)
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
