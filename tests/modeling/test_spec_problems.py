"""Bad specs and bad data: each must produce a Problem with the expected pointer and message.

Pointers follow RFC 6901 (JSON Pointer): tokens separated by '/', array positions 0-based, rooted at
the submission body, so model errors start /model/ and data errors /data/. The scenario is the
eight-schools model (data from Rubin 1981, reprinted in BDA3 Table 5.2; from memory).
"""

import copy
import math

import pytest

from worker.modeling import check_model, compile_model
from worker.problems import InvalidSubmission

BASE = {
    "inputs": {
        "J": {"type": "integer", "lower": 1},
        "y": {"type": "real", "shape": ["J"]},
        "sigma": {"type": "real", "shape": ["J"], "lower": 0},
        "school": {"type": "integer", "shape": ["J"], "lower": 1},
    },
    "unknowns": {"mu": {}, "tau": {"lower": 0}, "z": {"shape": ["J"]}},
    "derived": {"theta": "mu + tau * z"},
    "priors": [
        {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 5}},
        {"on": "tau", "distribution": "half_normal", "arguments": {"scale": 5}},
        {"on": "z", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
    ],
    "likelihood": [{"name": "effects", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "theta[school]", "scale": "sigma"}}],
    "per_draw": {"replicates": ["effects"]},
}
DATA = {"J": 8, "y": [28, 8, -3, 7, -1, 1, 18, 12], "sigma": [15, 10, 16, 11, 9, 11, 10, 18],
        "school": [1, 2, 3, 4, 5, 6, 7, 8]}


def test_base_spec_is_valid():
    assert check_model(BASE, DATA) == []


def derived(text):
    def change(spec, data):
        spec["derived"]["theta"] = text
    return change


def setting(path, value, root="spec"):
    """Set a nested member: path is a list of keys into the spec (or the data)."""
    def change(spec, data):
        target = spec if root == "spec" else data
        for key in path[:-1]:
            target = target[key]
        if value is DELETE:
            del target[path[-1]]
        elif isinstance(target, list) and path[-1] == len(target):
            target.append(value)
        else:
            target[path[-1]] = value
    return change


DELETE = object()


def several(*changes):
    def change(spec, data):
        for c in changes:
            c(spec, data)
    return change


CASES = [
    # --- names
    ("undeclared name", derived("mu + tau * zz"), "/model/derived/theta",
     "'zz' is not a declared input, unknown or derived quantity"),
    ("cycle among derived quantities",
     setting(["derived"], {"theta": "mu + tau * z", "a": "b + 1", "b": "a * 2"}),
     "/model/derived/a", "derived quantities form a cycle: a -> b -> a"),
    ("duplicate name across sections", setting(["unknowns", "y"], {}),
     "/model/unknowns/y", "'y' is declared as an input and again as an unknown"),
    ("function name used as a name", setting(["unknowns", "exp"], {"flat_prior": True}),
     "/model/unknowns/exp", "is the name of a function"),
    # --- shapes
    ("likelihood argument shape", several(
        setting(["inputs", "N"], {"type": "integer"}),
        setting(["inputs", "y", "shape"], ["N"]),
        setting(["N"], 10, root="data"),
        setting(["y"], list(range(10)), root="data"),
        setting(["likelihood", 0, "arguments", "location"], "mu")),
     "/model/likelihood/0/arguments/scale",
     "likelihood term 1: argument 'scale' has shape [8] but the observed input 'y' has shape [10]"),
    ("expression shape mismatch", derived("mu + tau * z + [1, 2]"), "/model/derived/theta",
     "shapes [8] and [2] do not match"),
    ("prior argument shape", setting(["priors", 0, "arguments", "location"], [0, 0]),
     "/model/priors/0/arguments/location",
     "argument 'location' has shape [2] but 'mu' has shape []"),
    ("vector @ vector", derived("mu + tau * z + z @ z"), "/model/derived/theta", "use dot(a, b)"),
    ("wrong number of arguments", derived("mu + tau * z + dot(z)"), "/model/derived/theta",
     "dot() takes 2 arguments, got 1"),
    ("data has the wrong shape", setting(["y"], [1, 2, 3, 4, 5, 6, 7], root="data"), "/data/y",
     "data 'y' has shape [7] but the input is declared with shape [8]"),
    ("data is a matrix for a vector input", setting(["y"], [[1, 2], [3, 4]], root="data"),
     "/data/y", "is a matrix but the input is declared as a vector"),
    ("ragged data", setting(["y"], [[1, 2], [3]], root="data"), "/data/y",
     "rectangular array of numbers"),
    ("shape given by a real input", setting(["unknowns", "z", "shape"], ["tau_scale"]),
     "/model/unknowns/z/shape/0", "'tau_scale', which is not a declared input"),
    ("shape given by a non-scalar input", setting(["unknowns", "z", "shape"], ["sigma"]),
     "/model/unknowns/z/shape/0", "must be a scalar integer input"),
    ("shape given by a real scalar input", several(
        setting(["inputs", "width"], {"type": "real"}), setting(["width"], 8.0, root="data"),
        setting(["unknowns", "z", "shape"], ["width"])),
     "/model/unknowns/z/shape/0", "must be a scalar integer input"),
    # --- integer / real
    ("real data for an integer input", setting(["J"], 8.5, root="data"), "/data/J",
     "declared integer but holds 1 non-whole value"),
    ("integer-only distribution observing a real input",
     setting(["likelihood", 0], {"name": "effects", "observed": "y", "distribution": "poisson",
                                 "arguments": {"log_rate": "theta"}}),
     "/model/likelihood/0/observed", "poisson is a distribution of integer data, but input 'y'"),
    ("real index array", derived("mu + tau * z[sigma]"), "/model/derived/theta",
     "'sigma' is real; indices must be integers"),
    ("index depending on unknowns", derived("mu + tau * z[tau]"), "/model/derived/theta",
     "depends on unknowns"),
    # --- supports and bounds
    ("negative constant scale", setting(["priors", 0, "arguments", "scale"], -1),
     "/model/priors/0/arguments/scale", "argument 'scale' must be a positive number, got -1"),
    ("array scale with a negative entry", setting(["priors", 2, "arguments", "scale"],
                                                  [1, 1, 1, -1, 1, 1, 1, 1]),
     "/model/priors/2/arguments/scale", "must be a positive number in every entry"),
    ("zero constant scale in a likelihood", setting(["likelihood", 0, "arguments", "scale"], 0),
     "/model/likelihood/0/arguments/scale", "must be a positive number, got 0"),
    ("data below its declared lower bound", setting(["sigma"], [15, 10, -16, 11, 9, 11, 10, 18],
                                                   root="data"),
     "/data/sigma/2", "below the lower bound 0, the first sigma[3] = -16"),
    ("data above an upper bound named by an input", several(
        setting(["inputs", "school", "upper"], "J"),
        setting(["school"], [1, 2, 3, 4, 5, 6, 7, 9], root="data")),
     "/data/school/7", "above the upper bound 8"),
    ("observed data outside the distribution's support", several(
        setting(["inputs", "hits"], {"type": "integer", "shape": ["J"]}),
        setting(["hits"], [0, 1, 1, 2, 0, 1, 0, 1], root="data"),
        setting(["likelihood", 1], {"name": "hit", "observed": "hits",
                                    "distribution": "bernoulli",
                                    "arguments": {"log_odds": "theta"}})),
     "/data/hits/3", "bernoulli needs 0 or 1"),
    ("prior support against the declaration", setting(["priors", 0], {
        "on": "mu", "distribution": "half_normal", "arguments": {"scale": 1}}),
     "/model/priors/0/distribution", "declare 'mu' with lower: 0"),
    ("uniform prior on an unknown that can leave its interval", setting(["priors", 1], {
        "on": "tau", "distribution": "uniform", "arguments": {"lower": 0, "upper": 10}}),
     "/model/priors/1/distribution", "declare 'tau' with lower: 0 and upper: 10"),
    ("lower bound not below upper bound", setting(["unknowns", "tau"], {"lower": 2, "upper": 1}),
     "/model/unknowns/tau", "the lower bound 2 must be below the upper bound 1"),
    # --- bad values in the data
    ("NaN in data", setting(["y"], [28, 8, -3, math.nan, -1, 1, 18, 12], root="data"),
     "/data/y/3", "not finite numbers (NaN, infinity or null), the first at y[4]"),
    ("null in data", setting(["y"], [None, 8, -3, 7, -1, 1, 18, 12], root="data"), "/data/y/0",
     "not finite numbers"),
    ("infinity in data", setting(["sigma"], [15, 10, 16, 11, 9, 11, 10, math.inf], root="data"),
     "/data/sigma/7", "not finite numbers"),
    ("missing data", setting(["sigma"], DELETE, root="data"), "/data/sigma",
     "no data given for input 'sigma'"),
    ("data for an undeclared input", setting(["extra"], 1, root="data"), "/data/extra",
     "no input of that name is declared"),
    ("index value out of range", several(
        setting(["inputs", "school", "lower"], DELETE),
        setting(["school"], [1, 2, 3, 4, 5, 6, 7, 9], root="data")),
     "/data/school/7", "has value 9 (at school[8]) but vector positions run from 1 to 8"),
    ("index zero", several(
        setting(["inputs", "school", "lower"], DELETE),
        setting(["school"], [0, 2, 3, 4, 5, 6, 7, 8], root="data")),
     "/data/school/0", "has value 0"),
    ("literal index out of range", derived("mu + tau * z[9]"), "/model/derived/theta",
     "the index has value 9 but vector positions run from 1 to 8"),
    # --- distributions and terms
    ("unknown distribution", setting(["priors", 0, "distribution"], "norml"),
     "/model/priors/0/distribution", "unknown distribution 'norml'; known distributions:"),
    ("unknown distribution lists the valid ones", setting(["priors", 0, "distribution"], "norml"),
     "/model/priors/0/distribution", "half_normal"),
    ("wrong argument names", setting(["priors", 0, "arguments"], {"mean": 0, "sd": 1}),
     "/model/priors/0/arguments", "takes the arguments (location, scale)"),
    ("unknown with no prior", setting(["priors"], [BASE["priors"][0], BASE["priors"][1]]),
     "/model/unknowns/z", "unknown 'z' has no prior"),
    ("prior on an input", setting(["priors", 3], {"on": "sigma", "distribution": "half_normal",
                                                  "arguments": {"scale": 1}}),
     "/model/priors/3/on", "'sigma' is an input"),
    ("prior on something undeclared", setting(["priors", 3], {
        "on": "phi", "distribution": "normal", "arguments": {"location": 0, "scale": 1}}),
     "/model/priors/3/on", "'phi' is not a declared unknown or derived quantity"),
    ("observed is not an input", setting(["likelihood", 0, "observed"], "theta"),
     "/model/likelihood/0/observed", "must be an input, but it is a derived quantity"),
    ("duplicate likelihood term names", setting(["likelihood", 1], dict(BASE["likelihood"][0])),
     "/model/likelihood/1/name", "used by an earlier likelihood term"),
    ("replicates of an unknown term", setting(["per_draw", "replicates"], ["effect"]),
     "/model/per_draw/replicates/0", "'effect' is not the name of a likelihood term"),
    # --- expressions reaching for Python
    ("attribute access", derived("mu.__class__"), "/model/derived/theta",
     "attribute access ('.') is not allowed"),
    ("dunder name", derived("__import__"), "/model/derived/theta",
     "names may not begin with an underscore"),
    ("call outside the list", derived("eval(mu)"), "/model/derived/theta",
     "'eval' is not a function of the language"),
    ("keyword syntax", derived("exp(x=mu)"), "/model/derived/theta",
     "keyword arguments and assignment"),
    ("string literal", derived("'mu'"), "/model/derived/theta", "strings are not allowed"),
    ("lambda-like syntax", derived("lambda: mu"), "/model/derived/theta", "':'"),
    ("comparison outside select", derived("mu > 0"), "/model/derived/theta",
     "comparisons are allowed only as the condition of select"),
    ("absurd nesting", derived("(" * 200 + "mu" + ")" * 200), "/model/derived/theta",
     "nested more than 64 levels deep"),
    ("expression at the length limit", derived("mu" + " + mu" * 2500), "/model/derived/theta",
     "the limit is 10000"),
    # --- the schema
    ("misspelt section", setting(["priros"], []), "/model/priros",
     "'priros' is not a recognised field here"),
    ("bad input type", setting(["inputs", "y", "type"], "float"), "/model/inputs/y/type",
     "'float' is not one of: integer, real"),
    ("invalid name", setting(["unknowns", "2x"], {}), "/model/unknowns/2x",
     "'2x' is not a valid name"),
    ("structure together with bounds", setting(["unknowns", "tau"],
                                               {"lower": 0, "structure": "simplex"}),
     "/model/unknowns/tau", "either a structure or lower/upper bounds"),
    ("argument of the wrong JSON type", setting(["priors", 0, "arguments", "scale"], True),
     "/model/priors/0/arguments/scale", "expected a number, an array of numbers or an expression"),
    ("missing required field", setting(["likelihood", 0, "observed"], DELETE),
     "/model/likelihood/0", "'observed' is required but missing"),
]


@pytest.mark.parametrize(("label", "change", "where", "fragment"), CASES,
                         ids=[c[0] for c in CASES])
def test_problem_reported(label, change, where, fragment):
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    change(spec, data)
    problems = check_model(spec, data)
    matching = [p for p in problems if p.pointer == where and fragment in p.message]
    assert matching, f"{label}: expected {where!r} containing {fragment!r}, got {problems}"
    with pytest.raises(InvalidSubmission):
        compile_model(spec, data)


@pytest.mark.parametrize("path", [["priors", 0], ["likelihood", 0]])
def test_unknown_distribution_is_said_before_its_empty_arguments(path):
    """Issue 11 item 6: an unknown distribution with empty arguments is reported at the
    distribution, listing the valid names, and nothing is said about the arguments (which
    arguments are right depends on the distribution)."""
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    term = spec[path[0]][path[1]]
    term["distribution"], term["arguments"] = "normall", {}
    problems = check_model(spec, data)
    at = "/model/" + "/".join(map(str, path))
    assert problems[0].pointer == at + "/distribution"
    assert "unknown distribution 'normall'" in problems[0].message
    assert "half_normal" in problems[0].message and "poisson" in problems[0].message
    assert not [p for p in problems if p.pointer.startswith(at + "/arguments")]


def test_unknown_distribution_of_a_prediction_is_said_first():
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    spec["per_draw"]["predictions"] = [{"name": "new", "distribution": "Normal",
                                         "arguments": {}}]
    problems = check_model(spec, data)
    assert [p.pointer for p in problems] == ["/model/per_draw/predictions/0/distribution"]
    assert "unknown distribution 'Normal'" in problems[0].message


def test_table_is_large_enough():
    assert len(CASES) >= 30


def test_every_problem_is_reported_not_only_the_first():
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    spec["priors"][0]["arguments"]["scale"] = -2
    spec["priors"][1]["distribution"] = "half_normall"
    spec["derived"]["extra"] = "foo + 1"
    data["y"][2] = math.nan
    data["sigma"][0] = -1.0
    pointers = {p.pointer for p in check_model(spec, data)}
    assert {"/model/priors/0/arguments/scale", "/model/priors/1/distribution",
            "/model/derived/extra", "/data/y/2", "/data/sigma/0"} <= pointers


def test_problems_are_one_sentence_each():
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    data["y"] = [math.nan] * 8
    problems = check_model(spec, data)
    assert len(problems) == 1, "a large bad array gives one problem, not one per element"
    assert "8 value(s)" in problems[0].message


def _resolves(document, pointer):
    """RFC 6901 evaluation: every token but the last must exist; the last may name a missing
    member (a missing datum or field is reported where it should be)."""
    tokens = [t.replace("~1", "/").replace("~0", "~") for t in pointer.split("/")[1:]]
    target = document
    for position, token in enumerate(tokens):
        last = position == len(tokens) - 1
        if isinstance(target, dict):
            if token not in target:
                return last
            target = target[token]
        elif isinstance(target, list):
            if not token.isdigit() or int(token) >= len(target):
                return False
            target = target[int(token)]
        else:
            return False
    return True


@pytest.mark.parametrize(("label", "change", "where", "fragment"), CASES,
                         ids=[c[0] for c in CASES])
def test_every_pointer_resolves(label, change, where, fragment):
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    change(spec, data)
    for problem in check_model(spec, data):
        assert _resolves({"model": spec, "data": data}, problem.pointer), problem


def test_unknown_distribution_with_malformed_arguments_is_still_a_clean_problem():
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    spec["priors"][0]["distribution"], spec["priors"][0]["arguments"] = "normall", "location"
    problems = check_model(spec, data)
    assert [p.pointer for p in problems] == ["/model/priors/0/distribution"]
