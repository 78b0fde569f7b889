"""The table of malformed submissions: what is sent, the status expected and the field blamed.

The base is the normal-mean model of tests/service/bodies.py. Statuses follow RFC 9110 (400 a body
that is not JSON, 413 content too large, 415 unsupported media type, 422 content that is JSON but
not a valid submission; sections 15.5.1, 15.5.14, 15.5.16, 15.5.21).
"""

from __future__ import annotations

import copy
import json
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from tests.service.bodies import normal_mean

# The limits the table's app is built with (the oversized cases go just past them).
LIMITS = {"max_chains": 8, "max_draws": 5_000, "max_body_bytes": 20_000, "max_unknowns": 100,
          "callback_allow": "http://127.0.0.1:9/hooks/", "callback_secret": "table-secret"}
HOOKS = "http://127.0.0.1:9/hooks/"


@dataclass(frozen=True)
class Case:
    name: str
    status: int
    pointer: str               # an error's pointer must equal this or lie under it
    body: bytes
    content_type: str | None = "application/json"
    says: tuple[str, ...] = ()  # words the answer's messages must contain


def base() -> dict[str, Any]:
    return normal_mean(chains=2, warmup=100, draws=100, seed=5)


def changed(edit: Callable[[dict[str, Any]], Any]) -> bytes:
    body = copy.deepcopy(base())
    edit(body)
    return json.dumps(body).encode()


def with_location(expression: str) -> bytes:
    def edit(body: dict) -> None:
        body["model"]["likelihood"][0]["arguments"]["location"] = expression

    return changed(edit)


def set_in(path: tuple, value: Any) -> Callable[[dict], None]:
    def edit(body: dict) -> None:
        target = body
        for step in path[:-1]:
            target = target[step]
        target[path[-1]] = value

    return edit


def raw_data_y(token: str) -> bytes:
    """The base body with y[3] replaced by a bare token (NaN, Infinity: not JSON, but common)."""
    text = json.dumps(base())
    return text.replace('"y": [1.0, 2.0, 0.5,', f'"y": [1.0, 2.0, {token},', 1).encode()


def cyclic(body: dict) -> None:
    body["model"]["derived"] = {"a": "b + mu", "b": "2 * a"}
    body["model"]["likelihood"][0]["arguments"]["location"] = "a"


def count_model(body: dict) -> None:
    body["model"]["inputs"]["k"] = {"type": "integer", "shape": ["n"], "lower": 0}
    body["data"]["k"] = [1, 0, 2, -1, 3, 1, 0, 2]
    body["model"]["likelihood"].append(
        {"name": "counts", "observed": "k", "distribution": "poisson",
         "arguments": {"log_rate": "mu"}}
    )


def many_unknowns(body: dict) -> None:
    body["model"]["unknowns"]["extra"] = {"shape": [LIMITS["max_unknowns"] + 1]}
    body["model"]["priors"].append(
        {"on": "extra", "distribution": "normal", "arguments": {"location": 0, "scale": 1}}
    )


def nested(depth: int) -> str:
    return "exp(" * depth + "mu" + ")" * depth


def by_name(ref: Any) -> Callable[[dict], None]:
    """The base body sending a registered model reference instead of its spec."""

    def edit(body: dict) -> None:
        del body["model"]
        body["model_ref"] = ref

    return edit


def renamed(path: tuple, old: str, new: str) -> Callable[[dict], None]:
    """Rename member ``old`` of the object at ``path`` (the name-ending-in-newline cases)."""

    def edit(body: dict) -> None:
        target = body
        for step in path:
            target = target[step]
        target[new] = target.pop(old)

    return edit


def repeated_seed() -> bytes:
    """Two "seed" members in one object: JSON text a dict cannot hold (issue 13 item 8)."""
    text = json.dumps(base())
    return text.replace('"seed": 5', '"seed": 2026, "seed": 7', 1).encode()


def huge_integer() -> bytes:
    """y[0] as the integer 10^400, beyond double precision (issue 13 item 6)."""
    text = json.dumps(base())
    return text.replace('"y": [1.0,', '"y": [1' + "0" * 400 + ",", 1).encode()


def deep_data(depth: int) -> bytes:
    """An undeclared data member nested ``depth`` arrays deep."""
    text = json.dumps(base())
    return text.replace('"data": {', '"data": {"deep": ' + "[" * depth + "]" * depth + ", ", 1
                        ).encode()


def outer_product(body: dict) -> None:
    """A 2,000 x 2,000 matrix product and two more values that size: past the element budget."""
    size = 2_000
    body["model"]["inputs"].update({"column": {"type": "real", "shape": [size, 1]},
                                    "row": {"type": "real", "shape": [1, size]}})
    body["data"].update({"column": [[1]] * size, "row": [[1] * size]})
    body["model"]["derived"] = {"outer": "column @ row", "shifted": "outer + mu",
                                "scaled": "outer * mu"}


def newline_term(body: dict) -> None:
    body["model"]["likelihood"][0]["name"] = "obs\n"


# An id of the right shape that no job has (the table's store is empty).
NO_SUCH_JOB = "0" * 32


LIK = "/model/likelihood/0"
LOC = LIK + "/arguments/location"
def with_integer(declaration: dict, prior: dict | None = None,
                 edit: Callable[[dict], Any] | None = None) -> bytes:
    """The base body with an integer unknown k (issue 16), its prior when given, and an edit."""
    def change(body: dict) -> None:
        body["model"]["unknowns"]["k"] = {"type": "integer", **declaration}
        if prior is not None:
            body["model"]["priors"].append({"on": "k", **prior})
        if edit is not None:
            edit(body)

    return changed(change)


FLAT_K = {"lower": 1, "upper": 3, "flat_prior": True}


CASES = [
    # Not JSON, or not sent as JSON.
    Case("truncated_json", 400, "", b'{"model": {'),
    Case("trailing_garbage", 400, "", b'{"model": {}} extra'),
    Case("not_utf8", 400, "", b"\xff\xfe\x00{"),
    Case("empty_body", 400, "", b""),
    Case("text_plain", 415, "", json.dumps(base()).encode(), "text/plain"),
    Case("form_encoded", 415, "", b"model=1", "application/x-www-form-urlencoded"),
    Case("no_content_type", 415, "", json.dumps(base()).encode(), None),
    Case("over_body_limit", 413, "", b'{"labels": {"x": "' + b"a" * 25_000 + b'"}}'),
    # JSON, but of the wrong shape.
    Case("body_is_array", 422, "", b"[]"),
    Case("body_is_string", 422, "", b'"model"'),
    Case("body_is_null", 422, "", b"null"),
    Case("missing_model", 422, "/model", changed(lambda b: b.pop("model"))),
    Case("unknown_top_member", 422, "/settings", changed(set_in(("settings",), {}))),
    Case("model_is_list", 422, "/model", changed(set_in(("model",), []))),
    Case("inputs_is_list", 422, "/model/inputs", changed(set_in(("model", "inputs"), []))),
    Case("input_type_unknown", 422, "/model/inputs/y",
         changed(set_in(("model", "inputs", "y", "type"), "complex"))),
    Case("data_is_list", 422, "/data", changed(set_in(("data",), [1, 2]))),
    Case("missing_data_value", 422, "/data/y", changed(lambda b: b["data"].pop("y"))),
    Case("labels_not_strings", 422, "/labels", changed(set_in(("labels",), {"suite": 3}))),
    Case("label_with_nul", 422, "/labels/suite",
         changed(set_in(("labels",), {"suite": "a\u0000b"}))),
    # "$" in the schema's key pattern also matches before a final newline (Python re, as
    # jsonschema uses it): the service checks the whole key.
    Case("label_key_with_trailing_newline", 422, "/labels/suite\n",
         changed(set_in(("labels",), {"suite\n": "a"}))),
    Case("thresholds_wrong_type", 422, "/checks",
         changed(set_in(("checks",), {"max_rhat": "low"}))),
    # Distributions and names.
    Case("unknown_prior_distribution", 422, "/model/priors/0",
         changed(set_in(("model", "priors", 0, "distribution"), "gaussian")),
         says=("normal", "half_cauchy", "poisson")),
    Case("unknown_likelihood_distribution", 422, LIK,
         changed(set_in(("model", "likelihood", 0, "distribution"), "gauss")),
         says=("normal", "student_t")),
    Case("wrong_argument_name", 422, LIK,
         changed(set_in(("model", "likelihood", 0, "arguments"), {"mean": "mu", "scale": 1}))),
    Case("undeclared_name", 422, LOC, with_location("mu + nu")),
    Case("undeclared_observed", 422, LIK + "/observed",
         changed(set_in(("model", "likelihood", 0, "observed"), "z"))),
    Case("prior_on_undeclared", 422, "/model/priors/0/on",
         changed(set_in(("model", "priors", 0, "on"), "sigma"))),
    Case("cyclic_derived", 422, "/model/derived", changed(cyclic)),
    Case("self_cyclic_derived", 422, "/model/derived",
         changed(set_in(("model", "derived"), {"a": "a + 1"}))),
    Case("unknown_without_prior", 422, "/model", changed(set_in(("model", "priors"), []))),
    # Shapes.
    Case("data_shorter_than_declared", 422, "/data/y",
         changed(set_in(("data", "y"), [1.0, 2.0, 3.0]))),
    Case("empty_array", 422, "/data/y", changed(set_in(("data", "y"), []))),
    Case("scalar_for_vector", 422, "/data/y", changed(set_in(("data", "y"), 1.0))),
    Case("nested_list_for_vector", 422, "/data/y",
         changed(set_in(("data", "y"), [[1.0]] * 8))),
    Case("expression_shape_mismatch", 422, LOC, with_location("mu + [1, 2, 3]")),
    # Values inside data.
    Case("nan_in_data", 422, "/data/y", raw_data_y("NaN")),
    Case("infinity_in_data", 422, "/data/y", raw_data_y("Infinity")),
    Case("minus_infinity_in_data", 422, "/data/y", raw_data_y("-Infinity")),
    Case("null_in_data", 422, "/data/y", raw_data_y("null")),
    Case("string_in_data", 422, "/data/y", raw_data_y('"0.5"')),
    Case("boolean_in_data", 422, "/data/y", raw_data_y("true")),
    Case("below_declared_lower", 422, "/data/k", changed(count_model)),
    Case("above_declared_upper", 422, "/data/y", changed(
        lambda b: b["model"]["inputs"]["y"].update({"upper": 2.0}))),
    Case("real_for_integer_input", 422, "/data/n", changed(set_in(("data", "n"), 8.5))),
    Case("count_observing_real", 422, LIK, changed(set_in(
        ("model", "likelihood", 0), {"name": "obs", "observed": "y", "distribution": "poisson",
                                      "arguments": {"rate": 1.0}}))),
    Case("real_index", 422, LOC, with_location("[mu, mu][1.5]")),
    Case("negative_constant_scale", 422, LIK + "/arguments/scale",
         changed(set_in(("model", "likelihood", 0, "arguments", "scale"), -1.0))),
    # Sampler settings and the deployment's limits.
    Case("too_many_chains", 422, "/sampler/chains", changed(set_in(("sampler", "chains"), 9))),
    Case("zero_chains", 422, "/sampler/chains", changed(set_in(("sampler", "chains"), 0))),
    Case("chains_as_string", 422, "/sampler/chains",
         changed(set_in(("sampler", "chains"), "two"))),
    Case("too_many_draws", 422, "/sampler/draws", changed(set_in(("sampler", "draws"), 5_001))),
    Case("warmup_plus_draws_over_limit", 422, "/sampler", changed(
        lambda b: b["sampler"].update({"warmup_iterations": 3_000, "draws": 3_000}))),
    Case("negative_seed", 422, "/sampler/seed", changed(set_in(("sampler", "seed"), -1))),
    Case("fractional_seed", 422, "/sampler/seed", changed(set_in(("sampler", "seed"), 1.5))),
    Case("unknown_method", 422, "/sampler/method",
         changed(set_in(("sampler", "method"), "gibbs"))),
    Case("unknown_preconditioning", 422, "/sampler/preconditioning",
         changed(set_in(("sampler", "preconditioning"), "diagonalised")),
         says=("none", "per_coordinate", "full")),
    Case("start_spread_zero", 422, "/sampler/start_spread",
         changed(set_in(("sampler", "start_spread"), 0))),
    Case("interval_level_one", 422, "/summary/interval",
         changed(set_in(("summary",), {"interval": 1})), says=("strictly between 0 and 1",)),
    Case("interval_level_text", 422, "/summary/interval",
         changed(set_in(("summary",), {"interval": "90%"}))),
    Case("unknown_summary_setting", 422, "/summary/quantiles",
         changed(set_in(("summary",), {"quantiles": [0.5]}))),
    Case("patterns_not_a_list", 422, "/summary/patterns",
         changed(set_in(("summary",), {"patterns": "mu"}))),
    Case("patterns_of_an_unknown_name", 422, "/summary/patterns/0",
         changed(set_in(("summary",), {"patterns": ["gamma"]})), says=("no quantity",)),
    Case("patterns_of_a_real_quantity", 422, "/summary/patterns/0",
         changed(set_in(("summary",), {"patterns": ["mu"]})), says=("not integer-valued",)),
    Case("patterns_named_twice", 422, "/summary/patterns/1", changed(
        lambda b: (count_model(b), b["data"]["k"].__setitem__(3, 1),
                   b["model"].update({"per_draw": {"replicates": ["counts"]}}),
                   b.update({"summary": {"patterns": ["replicate.counts"] * 2}})))),
    Case("ordered_with_upper", 422, "/model/unknowns/mu", changed(
        set_in(("model", "unknowns", "mu"), {"shape": [2], "structure": "ordered", "upper": 1}))),
    Case("too_many_unknowns", 422, "/model/unknowns", changed(many_unknowns)),
    Case("initial_value_undeclared", 422, "/sampler/initial_values", changed(
        set_in(("sampler", "initial_values"), {"nu": 1.0}))),
    # Expressions that reach outside the language.
    Case("deep_parentheses", 422, LOC, with_location("(" * 200 + "mu" + ")" * 200)),
    Case("deep_calls", 422, LOC, with_location(nested(80))),
    Case("attribute_access", 422, LOC, with_location("mu.real")),
    Case("dunder_attribute", 422, LOC, with_location("mu.__class__")),
    Case("underscore_name", 422, LOC, with_location("__import__")),
    Case("import_call", 422, LOC, with_location("__import__('os').system('true')")),
    Case("eval_call", 422, LOC, with_location("eval(mu)")),
    Case("open_call", 422, LOC, with_location("open(mu)")),
    Case("keyword_argument", 422, LOC, with_location("exp(x=mu)")),
    Case("string_literal", 422, LOC, with_location("'mu'")),
    Case("double_star_power", 422, LOC, with_location("mu ** 2")),
    Case("lambda_syntax", 422, LOC, with_location("lambda: mu")),
    Case("slice_syntax", 422, LOC, with_location("[mu, mu][1:2]")),
    Case("comparison_outside_select", 422, LOC, with_location("mu < 1")),
    Case("expression_too_long", 422, LOC, with_location(" + ".join(["mu"] * 2_600))),
    # The registry, reuse and warm-start members (docs/registry.md: "Registering models",
    # "Result reuse", "Warm starts"); none needs an earlier job or model: the table's store is
    # empty.
    Case("model_and_model_ref", 422, "/model_ref",
         changed(set_in(("model_ref",), {"name": "demand"}))),
    Case("model_ref_not_object", 422, "/model_ref", changed(by_name("demand"))),
    Case("model_ref_bad_name", 422, "/model_ref/name", changed(by_name({"name": "-demand"}))),
    Case("model_ref_name_newline", 422, "/model_ref/name",
         changed(by_name({"name": "demand\n"}))),
    Case("model_ref_version_zero", 422, "/model_ref/version",
         changed(by_name({"name": "demand", "version": 0}))),
    Case("model_ref_version_string", 422, "/model_ref/version",
         changed(by_name({"name": "demand", "version": "1"}))),
    Case("model_ref_unknown_member", 422, "/model_ref/tag",
         changed(by_name({"name": "demand", "tag": "x"}))),
    Case("model_ref_not_registered", 422, "/model_ref/name", changed(by_name({"name": "demand"}))),
    Case("reuse_not_boolean", 422, "/reuse", changed(set_in(("reuse",), "no"))),
    Case("warm_start_not_object", 422, "/warm_start",
         changed(set_in(("warm_start",), NO_SUCH_JOB))),
    Case("warm_start_job_not_hex", 422, "/warm_start/job",
         changed(set_in(("warm_start",), {"job": "Z" * 32}))),
    Case("warm_start_unknown_member", 422, "/warm_start/chains",
         changed(set_in(("warm_start",), {"job": NO_SUCH_JOB, "chains": []}))),
    Case("warm_start_no_such_job", 422, "/warm_start/job",
         changed(set_in(("warm_start",), {"job": NO_SUCH_JOB})), says=("no job",)),
    Case("warm_start_unsupported_method", 422, "/warm_start/job", changed(lambda b: (
        b["sampler"].update({"method": "gibbs"}), b.update({"warm_start": {"job": NO_SUCH_JOB}})))),
    # Issue 13: input that used to get through or end in a 500.
    Case("repeated_key", 400, "/sampler/seed", repeated_seed(), says=("seed",)),
    Case("integer_beyond_double", 422, "/data/y/0", huge_integer()),
    Case("nested_past_the_parser", 400, "", deep_data(9_000)),
    Case("nested_past_the_depth_limit", 400, "/data/deep", deep_data(70)),
    Case("unknown_name_newline", 422, "/model/unknowns", changed(renamed(("model", "unknowns"),
                                                                          "mu", "mu\n"))),
    Case("input_name_newline", 422, "/model/inputs", changed(renamed(("model", "inputs"),
                                                                      "y", "y\n"))),
    Case("derived_name_newline", 422, "/model/derived",
         changed(set_in(("model", "derived"), {"shift\n": "mu + 1"}))),
    Case("formula_name_newline", 422, "/model/per_draw",
         changed(set_in(("model", "per_draw"), {"formulas": {"twice\n": "2 * mu"}}))),
    Case("term_name_newline", 422, LIK, changed(newline_term)),
    Case("element_budget", 422, "/model/derived/scaled", changed(outer_product),
         says=("work budget",)),
    # Callback URLs (issue 13 items 4 and 5): normalised before the prefix check, dot segments,
    # encoded dots and user information refused outright, unparsable URLs a 422 at the pointer.
    Case("callback_dot_segments", 422, "/notify/url",
         changed(set_in(("notify",), {"url": HOOKS + "../../admin"})), says=("segments",)),
    Case("callback_encoded_dots", 422, "/notify/url",
         changed(set_in(("notify",), {"url": HOOKS + "%2e%2e/%2E%2E/admin"})), says=("dots",)),
    Case("callback_user_information", 422, "/notify/url",
         changed(set_in(("notify",), {"url": "http://127.0.0.1:9@evil.invalid/hooks/x"}))),
    Case("callback_unparsable", 422, "/notify/url",
         changed(set_in(("notify",), {"url": "http://["})), says=("parsed",)),
    Case("callback_port_out_of_range", 422, "/notify/url",
         changed(set_in(("notify",), {"url": "http://127.0.0.1:99999/hooks/x"}))),
    # Issue 16: integer unknowns. Their support must be finite and small enough to weigh at
    # every update; they are never observed; their priors are distributions of integers that
    # cover the bounds; an approximation needing derivatives in every unknown is refused.
    Case("integer_unbounded", 422, "/model/unknowns/k",
         with_integer({"lower": 0, "flat_prior": True}), says=("finite",)),
    Case("integer_support_too_large", 422, "/model/unknowns/k",
         with_integer({"lower": 0, "upper": 20_000, "flat_prior": True}), says=("limit",)),
    Case("integer_bound_not_an_input", 422, "/model/unknowns/k/upper",
         with_integer({"lower": 1, "upper": "stores", "flat_prior": True})),
    Case("integer_bound_fractional", 422, "/model/unknowns/k/upper",
         with_integer({"lower": 1, "upper": 2.5, "flat_prior": True})),
    Case("continuous_bound_named", 422, "/model/unknowns/mu/lower",
         changed(set_in(("model", "unknowns", "mu"), {"lower": "n"}))),
    Case("integer_observed", 422, f"{LIK[:-2]}/1/observed", with_integer(FLAT_K, edit=lambda b: (
        b["model"]["likelihood"].append({"name": "seen", "observed": "k",
                                         "distribution": "poisson", "arguments": {"rate": 1}}))),
         says=("cannot be observed",)),
    Case("integer_continuous_prior", 422, "/model/priors/1/distribution",
         with_integer({"lower": 1, "upper": 3},
                      {"distribution": "normal", "arguments": {"location": 0, "scale": 1}})),
    Case("integer_prior_misses_bounds", 422, "/model/priors/1/distribution",
         with_integer({"lower": 0, "upper": 3},
                      {"distribution": "bernoulli", "arguments": {"probability": 0.5}}),
         says=("support",)),
    Case("integer_truncated_prior_varies", 422, "/model/priors/1/distribution",
         with_integer({"lower": 0, "upper": 5},
                      {"distribution": "poisson", "arguments": {"rate": "exp(mu)"}}),
         says=("normalising",)),
    Case("integer_behind_derived_prior", 422, "/model/priors/1/on", with_integer(
        FLAT_K, edit=lambda b: (
            b["model"].update({"derived": {"shifted": "mu + k"}}),
            b["model"]["priors"].append({"on": "shifted", "distribution": "normal",
                                         "arguments": {"location": 0, "scale": 1}})))),
    Case("integer_index_beyond_vector", 422, f"{LIK[:-2]}/0/arguments/location", with_integer(
        FLAT_K, edit=lambda b: (
            b["model"]["unknowns"].update({"a": {"shape": [2], "flat_prior": True}}),
            b["model"]["likelihood"][0]["arguments"].update({"location": "mu + a[k]"}))),
         says=("bounds",)),
    Case("integer_with_laplace", 422, "/sampler/method", with_integer(
        FLAT_K, edit=lambda b: b["sampler"].update({"method": "laplace", "chains": 1,
                                                    "warmup_iterations": 0}))),
    Case("integer_with_warm_start", 422, "/warm_start",
         with_integer(FLAT_K, edit=lambda b: b.update({"warm_start": {"job": NO_SUCH_JOB}}))),
    # Issue 16, summed-out integer unknowns (worker/modeling/summing.py): only integers, whose
    # elements are independent given the rest, whose terms no other integer shares, and whose
    # support is small enough to sum at every gradient.
    Case("summed_out_continuous", 422, "/model/unknowns/mu/summed_out",
         changed(set_in(("model", "unknowns", "mu"), {"summed_out": True}))),
    Case("summed_out_coupled", 422, "/model/unknowns/k/summed_out", with_integer(
        {"shape": ["n"], "lower": 0, "upper": 1, "summed_out": True, "flat_prior": True},
        edit=lambda b: b["model"]["likelihood"][0]["arguments"].update(
            {"location": "mu + 0.1 * sum(k)"})), says=("independent",)),
    Case("summed_out_too_many_values", 422, "/model/unknowns/k/summed_out", with_integer(
        {"lower": 1, "upper": 1500, "summed_out": True, "flat_prior": True},
        edit=lambda b: b["model"]["likelihood"][0]["arguments"].update(
            {"location": "mu + 0.001 * k"})), says=("1000",)),
    Case("summed_out_shares_a_term", 422, "/model/unknowns/k/summed_out", with_integer(
        {**FLAT_K, "summed_out": True}, edit=lambda b: (
            b["model"]["unknowns"].update({"j": {"type": "integer", **FLAT_K}}),
            b["model"]["likelihood"][0]["arguments"].update({"location": "mu + 0.1 * k * j"}))),
         says=("shares a term",)),
    Case("callback_other_path", 422, "/notify/url",
         changed(set_in(("notify",), {"url": "http://127.0.0.1:9/admin"})), says=("prefix",)),
]
