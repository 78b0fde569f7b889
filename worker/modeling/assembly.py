"""From a schema-valid spec and its data to a typed graph with terms, recording every problem.

Checking and building are one pass: the same code that would build a node is the code that finds
what is wrong with it, so the checks cannot drift from what the compiled model really does. When a
declaration is broken its name is marked, and expressions that use it are not reported again.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..problems import Problem, pointer
from . import expressions as ex
from . import operations as ops
from . import reparametrisation
from .data_checks import DimensionTable, InputValue, check_inputs, element_pointer, flat_label
from .distributions import (
    SUPPORT_PHRASES,
    VARIATE_PHRASES,
    Distribution,
    distribution_names,
    find_distribution,
    support_holds,
)
from .graph import Graph, IndexRangeError
from .linearity import NONLINEAR, classify
from .reparametrisation import QrReparametrisation
from .shapes import ValueType, batch_shape, describe
from .tape import Term, UnknownSlot
from .transforms import make_transform
from .work_budget import BudgetExceeded, WorkBudget

SECTIONS = ("inputs", "unknowns", "derived")
# Variate kinds a prior may put on a continuous unknown, and what the declaration must guarantee.
POSITIVE_KINDS = {"positive", "nonnegative"}
# A prior's flag saying that a prior on a nonlinear derived quantity is meant without its Jacobian.
JACOBIAN_FLAG = "jacobian_omitted_on_purpose"
DISCRETE_KINDS = {"binary", "nonnegative_integer", "count_up_to_trials", "category",
                  "counts_summing_to_trials"}
# The most values one Gibbs update of an integer unknown may weigh: elements x support size.
# Each value costs one evaluation of the terms that involve the unknown, so this bounds the work
# of one update to that of about 10,000 such evaluations; we chose it so that a change-point over
# a few thousand periods, or a mixture of a few thousand rows over a handful of components, fits
# (DEVELOPERS.md, "Integer unknowns").
INTEGER_VALUE_LIMIT = 10_000


@dataclass
class DistributionTerm:
    """A prior, likelihood term or prediction: a distribution and its argument nodes."""

    label: str
    distribution: Distribution
    argument_names: tuple[str, ...]
    argument_nodes: tuple[int, ...]
    variate: int | None = None
    observed: str | None = None
    name: str | None = None
    shape: tuple[int, ...] = ()
    at: str = ""
    sign_guaranteed: bool = False


@dataclass
class Assembly:
    graph: Graph = field(default_factory=Graph)
    inputs: dict[str, InputValue] = field(default_factory=dict)
    slots: list[UnknownSlot] = field(default_factory=list)
    dimension: int = 0
    derived: dict[str, int] = field(default_factory=dict)
    priors: list[DistributionTerm] = field(default_factory=list)
    likelihood: list[DistributionTerm] = field(default_factory=list)
    formulas: dict[str, int] = field(default_factory=dict)
    predictions: list[DistributionTerm] = field(default_factory=list)
    replicates: list[str] = field(default_factory=list)
    pointwise: list[str] = field(default_factory=list)
    reparametrised: list[QrReparametrisation] = field(default_factory=list)
    # the other unknowns the reparametrisation considered, each with the reason it was not used
    not_reparametrised: list[dict[str, str]] = field(default_factory=list)
    reparametrise: bool = True
    # integer unknowns: held, not sampled by the continuous step; their values follow the
    # continuous coordinates in a point (start/stop count from `dimension`)
    held: list[UnknownSlot] = field(default_factory=list)
    # integer unknowns summed out of the density (worker/modeling/summing.py); their start/stop
    # count from 0 in a block of their own, since a point holds no values of theirs
    summed: list[UnknownSlot] = field(default_factory=list)
    integer_bounds: dict[str, tuple[int, int]] = field(default_factory=dict)

    def terms(self) -> list[Term]:
        return [
            Term(t.variate, t.distribution, t.argument_names, t.argument_nodes,
                 t.sign_guaranteed)
            for t in (*self.priors, *self.likelihood)
        ]


class _Assembler:
    def __init__(self, spec: dict, data: Any, reparametrise: bool = True):
        self.spec = spec
        self.reparametrise = reparametrise
        self.problems: list[Problem] = []
        self.broken: set[str] = set()
        self.out = Assembly()
        self.declared_inputs: dict[str, dict] = spec.get("inputs", {})
        self.declared_unknowns: dict[str, dict] = spec["unknowns"]
        self.declared_derived: dict[str, str] = spec.get("derived", {})
        self.derived_trees: dict[str, ex.Node] = {}
        self.data = data
        self.budget: WorkBudget = self.out.graph.budget

    def problem(self, at: str, message: str) -> None:
        self.problems.append(Problem(at, message))

    # ---- top level
    def run(self) -> Assembly:
        data_problems, values, dims = check_inputs(self.declared_inputs, self.data)
        self.problems.extend(data_problems)
        self.check_names()
        graph = self.out.graph
        for name in self.declared_inputs:
            if name in values:
                graph.names[name] = graph.constant(values[name].value, values[name].kind)
                graph.input_names.add(name)
                self.out.inputs[name] = values[name]
            else:
                self.broken.add(name)
        self.unknowns(dims)
        self.reparametrised_unknowns()
        self.derived()
        covered = self.priors()
        self.likelihood()
        self.per_draw()
        for name, declared in self.declared_unknowns.items():
            if name not in covered and not declared.get("flat_prior", False):
                self.problem(pointer("model", "unknowns", name),
                             f"unknown '{name}' has no prior; add a prior term on it (or on a "
                             "derived quantity that uses it) or declare it with flat_prior: true")
        return self.out

    def check_names(self) -> None:
        seen: dict[str, str] = {}
        section_words = {"inputs": "an input", "unknowns": "an unknown",
                         "derived": "a derived quantity", "formulas": "a per-draw formula",
                         "predictions": "a prediction"}
        per_draw = self.spec.get("per_draw", {})
        entries: list[tuple[str, str, str]] = []
        for section in SECTIONS:
            for name in self.spec.get(section, {}):
                entries.append((section, name, pointer("model", section, name)))
        for name in per_draw.get("formulas", {}):
            entries.append(("formulas", name, pointer("model", "per_draw", "formulas", name)))
        for k, item in enumerate(per_draw.get("predictions", [])):
            entries.append(("predictions", item["name"],
                            pointer("model", "per_draw", "predictions", k, "name")))
        for section, name, at in entries:
            if name in ex.FUNCTIONS:
                self.problem(at, f"'{name}' is the name of a function and cannot name "
                                 f"{section_words[section]}")
                self.broken.add(name)
            elif name in seen:
                self.problem(at, f"'{name}' is declared as {seen[name]} and again as "
                                 f"{section_words[section]}; names must be unique")
                self.broken.add(name)
            else:
                seen[name] = section_words[section]

    # ---- expressions and arguments
    def parse(self, text: str, at: str, context: str) -> ex.Node | None:
        """The syntax tree, charged to the work budget; None (with a problem) when it is bad."""
        try:
            tree = ex.parse(text)
        except ex.ExpressionError as error:
            self.problem(at, f"{context}: {error.message} (at character {error.position + 1})")
            return None
        try:
            self.budget.charge_expression(tree)
        except BudgetExceeded as error:
            self.problem(at, f"{context}: {error}")
            raise
        return tree

    def expression(self, text: str, at: str, context: str,
                   tree: ex.Node | None = None) -> int | None:
        tree = tree or self.parse(text, at, context)
        if tree is None or ex.names_in(tree) & self.broken:
            return None
        try:
            return self.out.graph.add_expression(tree)
        except IndexRangeError as error:
            if error.data_name is not None:
                shape = self.out.inputs[error.data_name].shape
                self.problem(element_pointer(("data", error.data_name), error.first_bad, shape),
                             f"{context}: {error.message}")
            else:
                self.problem(at, f"{context}: {error.message} (at character {error.position + 1})")
        except ex.ExpressionError as error:
            self.problem(at, f"{context}: {error.message} (at character {error.position + 1})")
        except BudgetExceeded as error:
            self.problem(at, f"{context}: {error}")
            raise
        return None

    def argument(self, raw: Any, at: str, context: str) -> int | None:
        if isinstance(raw, str):
            return self.expression(raw, at, context)
        try:
            value = np.array(raw, dtype=float)
        except (ValueError, TypeError):
            self.problem(at, f"{context}: an array argument must be rectangular")
            return None
        if not np.all(np.isfinite(value)):
            self.problem(at, f"{context}: constant arguments must be finite numbers")
            return None
        kind = "integer" if np.all(value == np.round(value)) else "real"
        return self.out.graph.constant(value, kind)

    def distribution(self, item: dict, at: tuple, context: str) -> Distribution | None:
        name = item["distribution"]
        try:
            return find_distribution(name, set(item["arguments"]))
        except LookupError as error:
            field_name = "distribution" if name not in distribution_names() else "arguments"
            self.problem(pointer(*at, field_name), f"{context}: {error.args[0]}")
            return None

    def arguments(self, item: dict, at: tuple, context: str,
                  distribution: Distribution) -> tuple[tuple[str, ...], tuple[int, ...]] | None:
        names: list[str] = []
        nodes: list[int] = []
        ok = True
        graph = self.out.graph
        for arg in distribution.arguments:
            here = pointer(*at, "arguments", arg)
            node = self.argument(item["arguments"][arg], here, f"{context}, argument '{arg}'")
            if node is None:
                ok = False
                continue
            t = graph.type_of(node)
            if t.kind == "boolean":
                self.problem(here, f"{context}: argument '{arg}' is a comparison, not a number")
                ok = False
                continue
            support = distribution.argument_support.get(arg, "real")
            value = graph.nodes[node].value
            if value is not None and not support_holds(support, value):
                shown = f", got {float(value):g}" if value.ndim == 0 else " in every entry"
                self.problem(here, f"{context}: argument '{arg}' must be "
                                   f"{SUPPORT_PHRASES.get(support, support)}{shown}")
                ok = False
                continue
            names.append(arg)
            nodes.append(node)
        return (tuple(names), tuple(nodes)) if ok else None

    def elementwise_shapes(self, context: str, at: tuple, distribution: Distribution,
                           names: tuple[str, ...], nodes: tuple[int, ...],
                           variate_shape: tuple[int, ...], variate_words: str) -> bool:
        """Scalar distributions: every argument a scalar or exactly the variate's shape."""
        if distribution.event_ndim or any(distribution.argument_event_ndim.values()):
            return True
        ok = True
        for arg, node in zip(names, nodes, strict=True):
            shape = self.out.graph.type_of(node).shape
            if shape and shape != variate_shape:
                self.problem(pointer(*at, "arguments", arg),
                             f"{context}: argument '{arg}' has shape {describe(shape)} but "
                             f"{variate_words} has shape {describe(variate_shape)}")
                ok = False
        return ok

    # ---- unknowns
    def unknowns(self, dims: DimensionTable) -> None:
        offset = 0
        graph = self.out.graph
        integers: list[tuple[str, dict, tuple[int, ...]]] = []
        for name, declared in self.declared_unknowns.items():
            at = ("model", "unknowns", name)
            shape = dims.resolve(declared.get("shape", []), (*at, "shape"), self.problems,
                                 f"unknown '{name}'")
            if shape is None or name in self.broken:
                self.broken.add(name)
                continue
            if declared.get("type") == "integer":
                integers.append((name, declared, shape))
                continue
            if declared.get("summed_out"):
                self.problem(pointer(*at, "summed_out"),
                             f"unknown '{name}' is continuous: only an integer unknown "
                             "(type: integer) can be summed out of the density")
                self.broken.add(name)
                continue
            lower, upper = declared.get("lower"), declared.get("upper")
            named = [side for side in ("lower", "upper") if isinstance(declared.get(side), str)]
            if named:
                self.problem(pointer(*at, named[0]),
                             f"unknown '{name}': the bound of a continuous unknown must be a "
                             "number; only an integer unknown (type: integer) may take its bound "
                             "from an input")
                self.broken.add(name)
                continue
            if lower is not None and upper is not None and not lower < upper:
                self.problem(pointer(*at), f"unknown '{name}': the lower bound {lower:g} must be "
                                           f"below the upper bound {upper:g}")
                self.broken.add(name)
                continue
            try:
                transform = make_transform(shape, lower, upper, declared.get("structure"))
            except (ValueError, TypeError) as error:
                self.problem(pointer(*at), f"unknown '{name}': {error}")
                self.broken.add(name)
                continue
            size = transform.dimension
            unbounded = transform.structure == "unbounded"
            node = graph.leaf(ValueType("real", shape))
            graph.names[name] = node
            self.out.slots.append(UnknownSlot(name, node, offset, offset + size, shape,
                                              None if unbounded else transform))
            offset += size
        self.out.dimension = offset
        for name, declared, shape in integers:
            offset = self.integer_unknown(name, declared, shape, dims, offset)

    def integer_bound(self, name: str, declared: dict, side: str,
                      dims: DimensionTable) -> int | None:
        at = pointer("model", "unknowns", name, side)
        bound = declared.get(side)
        if bound is None:
            self.problem(pointer("model", "unknowns", name),
                         f"integer unknown '{name}' needs both a lower and an upper bound: its "
                         "values are weighed one by one at every update, so its support must be "
                         f"finite (the {side} bound is missing)")
            return None
        if isinstance(bound, str):
            declared_input = self.declared_inputs.get(bound)
            if (declared_input is None or declared_input.get("type") != "integer"
                    or declared_input.get("shape")):
                self.problem(at, f"integer unknown '{name}': the {side} bound names '{bound}', "
                                 "which must be a scalar integer input")
                return None
            if bound not in dims.sizes:
                return None  # the input's own data problem is reported already
            return int(dims.sizes[bound])
        if not (np.isfinite(bound) and float(bound) == round(bound)):
            self.problem(at, f"integer unknown '{name}': the {side} bound must be a whole "
                             f"number, got {bound:g}")
            return None
        return int(bound)

    def integer_unknown(self, name: str, declared: dict, shape: tuple[int, ...],
                        dims: DimensionTable, offset: int) -> int:
        """Declare one integer unknown (a held slot after the continuous ones); the new offset."""
        at = ("model", "unknowns", name)
        if "structure" in declared:
            self.problem(pointer(*at, "structure"),
                         f"integer unknown '{name}' takes lower and upper bounds, not a structure")
            self.broken.add(name)
            return offset
        lower = self.integer_bound(name, declared, "lower", dims)
        upper = self.integer_bound(name, declared, "upper", dims)
        if lower is None or upper is None:
            self.broken.add(name)
            return offset
        if lower > upper:
            self.problem(pointer(*at), f"integer unknown '{name}': the lower bound {lower} is "
                                       f"above the upper bound {upper}")
            self.broken.add(name)
            return offset
        size = int(np.prod(shape, dtype=np.int64))
        values = size * (upper - lower + 1)
        if values > INTEGER_VALUE_LIMIT:
            self.problem(pointer(*at),
                         f"integer unknown '{name}' has {size} element(s) of {upper - lower + 1} "
                         f"possible values each: {values} values to weigh at every update, above "
                         f"the limit of {INTEGER_VALUE_LIMIT}; narrow its bounds, or write the "
                         "model with a continuous unknown in its place")
            self.broken.add(name)
            return offset
        graph = self.out.graph
        node = graph.leaf(ValueType("integer", shape))
        graph.names[name] = node
        graph.integer_ranges[node] = (lower, upper)
        self.out.integer_bounds[name] = (lower, upper)
        if declared.get("summed_out"):
            start = sum(s.stop - s.start for s in self.out.summed)
            self.out.summed.append(UnknownSlot(name, node, start, start + size, shape, None))
            return offset
        self.out.held.append(UnknownSlot(name, node, offset, offset + size, shape, None))
        return offset + size

    def reparametrised_unknowns(self) -> None:
        """beta = R*^-1 (centre + spread u) for each unknown the QR plan takes; u is sampled."""
        graph = self.out.graph
        live = {name: value for name, value in self.out.inputs.items()
                if name not in self.broken}
        applied, skipped = reparametrisation.plan(self.spec, live, self.reparametrise)
        self.out.reparametrise = self.reparametrise
        self.out.not_reparametrised = skipped
        positions = {slot.name: k for k, slot in enumerate(self.out.slots)}
        for qr in applied:
            if qr.unknown not in positions:
                continue  # broken declaration, reported already
            k = positions[qr.unknown]
            slot = self.out.slots[k]
            if slot.shape != qr.r_inverse.shape[:1]:
                continue  # X @ beta does not fit: reported where the product is written
            vector = ValueType("real", slot.shape)
            fitted_type = ValueType("real", (qr.q_scaled.shape[0],))
            u = graph.leaf(vector)
            beta = graph.operation(ops.BINARY["@"], (
                graph.constant(qr.spread * qr.r_inverse, "real"), u), vector)
            beta = graph.operation(ops.BINARY["+"], (
                beta, graph.constant(qr.r_inverse @ qr.centre, "real")), vector)
            fitted = graph.operation(ops.BINARY["@"], (
                graph.constant(qr.spread * qr.q_scaled, "real"), u), fitted_type)
            fitted = graph.operation(ops.BINARY["+"], (
                fitted, graph.constant(qr.q_scaled @ qr.centre, "real")), fitted_type)
            graph.products[(graph.names[qr.matrix], beta)] = fitted
            graph.names[qr.unknown] = beta
            self.out.slots[k] = replace(slot, node=u)
            self.out.reparametrised.append(qr)

    # ---- derived quantities
    def derived(self) -> None:
        trees = self.derived_trees
        for name, text in self.declared_derived.items():
            if name in self.broken:
                continue
            tree = self.parse(text, pointer("model", "derived", name), f"derived quantity '{name}'")
            if tree is None:
                self.broken.add(name)
            else:
                trees[name] = tree
        depends = {name: sorted(ex.names_in(tree) & set(self.declared_derived))
                   for name, tree in trees.items()}
        order = self.topological_order(depends)
        for name in order:
            if set(depends[name]) & self.broken:
                self.broken.add(name)
                continue
            node = self.expression(self.declared_derived[name], pointer("model", "derived", name),
                                   f"derived quantity '{name}'", trees[name])
            if node is None:
                self.broken.add(name)
                continue
            self.out.graph.names[name] = node
            self.out.derived[name] = node

    def topological_order(self, depends: dict[str, list[str]]) -> list[str]:
        """Depth-first order without recursion; every cycle is reported once and marked broken."""
        state: dict[str, int] = {}  # 1 on the current path, 2 finished
        order: list[str] = []
        for root in depends:
            if root in state:
                continue
            path: list[str] = []
            stack: list[tuple[str, int]] = [(root, 0)]
            while stack:
                name, k = stack.pop()
                if k == 0:
                    state[name] = 1
                    path.append(name)
                deps = [d for d in depends.get(name, []) if d in depends]
                if k < len(deps):
                    stack.append((name, k + 1))
                    d = deps[k]
                    if state.get(d) == 1:
                        cycle = path[path.index(d):] + [d]
                        self.problem(pointer("model", "derived", d),
                                     "derived quantities form a cycle: " + " -> ".join(cycle))
                        self.broken.update(cycle)
                    elif d not in state:
                        stack.append((d, 0))
                    continue
                state[name] = 2
                path.pop()
                order.append(name)
        return order

    # ---- priors
    def priors(self) -> set[str]:
        covered: set[str] = set()
        graph = self.out.graph
        derived_names = set(self.declared_derived)
        for i, item in enumerate(self.spec.get("priors", [])):
            at = ("model", "priors", i)
            target = item["on"]
            context = f"prior term {i + 1} (on '{target}')"
            if target in self.declared_inputs:
                self.problem(pointer(*at, "on"), f"{context}: '{target}' is an input; priors "
                                                 "belong on unknowns or derived quantities")
                continue
            if target not in self.declared_unknowns and target not in derived_names:
                self.problem(pointer(*at, "on"), f"{context}: '{target}' is not a declared "
                                                 "unknown or derived quantity")
                continue
            integer_target = self.declared_unknowns.get(target, {}).get("type") == "integer"
            if target in self.declared_unknowns:
                covered.add(target)
            else:
                behind = self.unknowns_behind(target)
                covered.update(behind)
                held = sorted(b for b in behind
                              if self.declared_unknowns[b].get("type") == "integer")
                if held:
                    self.problem(pointer(*at, "on"),
                                 f"{context}: '{target}' depends on the integer unknown "
                                 f"'{held[0]}'; a density on a quantity that jumps between "
                                 "values has no Jacobian to make it a prior, so put the prior on "
                                 f"'{held[0]}' itself (and on the continuous unknowns)")
                    continue
            distribution = self.distribution(item, at, context)
            if distribution is None:
                continue
            if target in self.declared_unknowns and not integer_target:
                self.prior_support(target, distribution, pointer(*at, "distribution"), context)
            args = self.arguments(item, at, context, distribution)
            if args is None or target in self.broken:
                continue
            if integer_target and not self.integer_prior_support(target, distribution, args, at,
                                                                 context):
                continue
            variate = graph.names[target]
            shape = graph.type_of(variate).shape
            if not self.elementwise_shapes(context, at, distribution, *args, shape,
                                           f"'{target}'"):
                continue
            if (target in derived_names and not item.get(JACOBIAN_FLAG, False)
                    and classify(graph, variate) == NONLINEAR):
                self.problem(pointer(*at, "on"),
                             f"{context}: '{target}' is a nonlinear function of the unknowns, and "
                             "a prior on it leaves out the Jacobian of that function, so "
                             f"'{target}' would not have the stated distribution; put the prior "
                             "on an unknown (declare the unknown on the scale the prior is meant "
                             f"for), or add {JACOBIAN_FLAG}: true to this prior if the density "
                             "is meant as written")
                continue
            if target in self.declared_unknowns and distribution.variate_kind == "interval":
                self.interval_support(target, dict(zip(*args, strict=True)),
                                      pointer(*at, "distribution"), context)
            declared = self.declared_unknowns.get(target, {})
            guaranteed = (declared.get("lower") is not None and declared["lower"] >= 0) or \
                declared.get("structure") == "simplex"
            self.out.priors.append(DistributionTerm(context, distribution, *args,
                                                    variate=variate, at=pointer(*at),
                                                    sign_guaranteed=guaranteed))
        return covered

    def unknowns_behind(self, derived_name: str) -> set[str]:
        found: set[str] = set()
        stack, seen = [derived_name], set()
        while stack:
            name = stack.pop()
            if name in seen or name not in self.declared_derived:
                continue
            seen.add(name)
            tree = self.derived_trees.get(name)
            if tree is None:
                continue
            names = ex.names_in(tree)
            found.update(names & set(self.declared_unknowns))
            stack.extend(names & set(self.declared_derived))
        return found

    def prior_support(self, target: str, distribution: Distribution, at: str,
                      context: str) -> None:
        declared = self.declared_unknowns[target]
        kind = distribution.variate_kind
        structure = declared.get("structure")
        lower, upper = declared.get("lower"), declared.get("upper")
        words = VARIATE_PHRASES.get(kind, kind)
        if kind in DISCRETE_KINDS:
            self.problem(at, f"{context}: {distribution.name} is a distribution of {words}, but "
                             "unknowns are continuous")
        elif kind in POSITIVE_KINDS and not (lower is not None and lower >= 0):
            self.problem(at, f"{context}: {distribution.name} is a distribution of {words}, so "
                             f"declare '{target}' with lower: 0")
        elif kind == "unit" and not (lower is not None and lower >= 0 and upper is not None
                                     and upper <= 1):
            self.problem(at, f"{context}: {distribution.name} is a distribution of {words}, so "
                             f"declare '{target}' with lower: 0 and upper: 1")
        elif kind in ("simplex", "correlation_factor", "covariance_factor") and structure != kind:
            self.problem(at, f"{context}: {distribution.name} is a distribution of {words}, so "
                             f"declare '{target}' with structure: {kind}")

    def integer_prior_support(self, target: str, distribution: Distribution,
                              args: tuple[tuple[str, ...], tuple[int, ...]], at: tuple,
                              context: str) -> bool:
        """A prior on an integer unknown: a distribution of integers whose support holds the
        declared bounds, and, where the bounds cut part of it off, arguments fixed by the data
        (the truncated prior's normalising constant then stays a constant)."""
        graph = self.out.graph
        lower, upper = self.out.integer_bounds[target]
        kind = distribution.variate_kind
        here = pointer(*at, "distribution")
        if not distribution.discrete or distribution.event_ndim:
            words = VARIATE_PHRASES.get(kind, kind)
            self.problem(here, f"{context}: {distribution.name} is a distribution of {words}, but "
                               f"'{target}' is an integer unknown; give it a distribution of "
                               "single integers (categorical, bernoulli, binomial, poisson, ...)")
            return False
        values = {n: graph.nodes[k].value for n, k in zip(*args, strict=True)}
        low, high, widest = 0.0, np.inf, np.inf
        if kind == "binary":
            high = widest = 1.0
        elif kind == "category":
            shapes = {n: np.zeros(graph.type_of(k).shape) for n, k in zip(*args, strict=True)}
            low, high = 1.0, float(distribution.category_count(shapes))
            widest = high
        elif kind == "count_up_to_trials":
            trials = values.get("trials")
            if trials is None:
                self.problem(pointer(*at, "arguments", "trials"),
                             f"{context}: the trials of a prior on the integer unknown "
                             f"'{target}' set its support, so they must be fixed by the data")
                return False
            high, widest = float(np.min(trials)), float(np.max(trials))
        if lower < low or upper > high:
            self.problem(here, f"{context}: {distribution.name} gives probability only to "
                               f"{low:g} to {high:g}, but '{target}' is declared from {lower} to "
                               f"{upper}; declare bounds inside the prior's support")
            return False
        truncated = lower > low or upper < widest
        if truncated and any(v is None for v in values.values()):
            self.problem(here, f"{context}: the bounds {lower} to {upper} of '{target}' cut off "
                               f"part of the support of {distribution.name}, and its arguments "
                               "depend on unknowns, so the cut-off prior's normalising constant "
                               "would change with them; give arguments fixed by the data, or "
                               "bounds that cover the whole support")
            return False
        return True

    def interval_support(self, target: str, args: dict[str, int], at: str, context: str) -> None:
        """A prior on [lower, upper] needs an unknown that cannot leave that interval."""
        graph = self.out.graph
        values = {n: graph.nodes[k].value for n, k in args.items()}
        if any(v is None or v.ndim for v in values.values()):
            return  # bounds that vary or are arrays: the density itself says -inf outside
        low, high = float(values["lower"]), float(values["upper"])
        declared = self.declared_unknowns[target]
        lower, upper = declared.get("lower"), declared.get("upper")
        if lower is None or upper is None or lower < low or upper > high:
            self.problem(at, f"{context}: the prior is zero outside [{low:g}, {high:g}], so "
                             f"declare '{target}' with lower: {low:g} and upper: {high:g}")

    # ---- likelihood
    def likelihood(self) -> None:
        names_seen: set[str] = set()
        graph = self.out.graph
        for i, item in enumerate(self.spec.get("likelihood", [])):
            at = ("model", "likelihood", i)
            context = f"likelihood term {i + 1}"
            term_name, observed = item["name"], item["observed"]
            if term_name in names_seen:
                self.problem(pointer(*at, "name"), f"{context}: the name '{term_name}' is used by "
                                                   "an earlier likelihood term")
            names_seen.add(term_name)
            if self.declared_unknowns.get(observed, {}).get("type") == "integer":
                self.problem(pointer(*at, "observed"),
                             f"{context}: '{observed}' is an integer unknown and cannot be "
                             "observed; a value that was observed is data: declare it as an "
                             "input (split it in two where only some elements were observed)")
                continue
            if observed not in self.declared_inputs:
                what = ("an unknown" if observed in self.declared_unknowns else
                        "a derived quantity" if observed in self.declared_derived else
                        "not declared")
                self.problem(pointer(*at, "observed"),
                             f"{context}: the observed '{observed}' must be an input, but it is "
                             f"{what}")
                continue
            distribution = self.distribution(item, at, context)
            if distribution is None:
                continue
            declared = self.declared_inputs[observed]
            if distribution.discrete and declared["type"] != "integer":
                self.problem(pointer(*at, "observed"),
                             f"{context}: {distribution.name} is a distribution of integer data, "
                             f"but input '{observed}' is declared real")
                continue
            args = self.arguments(item, at, context, distribution)
            if args is None or observed in self.broken:
                continue
            variate = graph.names[observed]
            value = self.out.inputs[observed]
            if not self.elementwise_shapes(context, at, distribution, *args, value.shape,
                                           f"the observed input '{observed}'"):
                continue
            if not self.observed_in_support(context, distribution, args, value):
                continue
            self.out.likelihood.append(DistributionTerm(
                context, distribution, *args, variate=variate, observed=observed,
                name=term_name, shape=value.shape, at=pointer(*at)))

    def observed_in_support(self, context: str, distribution: Distribution,
                            args: tuple[tuple[str, ...], tuple[int, ...]],
                            value: InputValue) -> bool:
        graph = self.out.graph
        constants = {n: graph.nodes[k].value for n, k in zip(*args, strict=True)
                     if graph.nodes[k].constant}
        needs = {"interval": ("lower", "upper"), "count_up_to_trials": ("trials",),
                 "counts_summing_to_trials": ("trials",),
                 "category": distribution.arguments}.get(distribution.variate_kind, ())
        if any(n not in constants for n in needs):
            return True  # the bound depends on unknowns; the density itself will say -inf
        try:
            valid = np.broadcast_to(distribution.variate_valid(value.value, constants),
                                    value.value.shape[:value.value.ndim - distribution.event_ndim])
        except (TypeError, ValueError, KeyError):
            return True
        if np.all(valid):
            return True
        first = int(np.flatnonzero(~valid.ravel())[0])
        batch_shape = valid.shape
        words = VARIATE_PHRASES.get(distribution.variate_kind, distribution.variate_kind)
        self.problem(element_pointer(("data", value.name), first, batch_shape),
                     f"{context}: {distribution.name} needs {words}, but "
                     f"{int((~valid).sum())} value(s) of '{value.name}' are not, the first "
                     f"{flat_label(value.name, first, batch_shape)}")
        return False

    # ---- per-draw outputs
    def per_draw(self) -> None:
        per_draw = self.spec.get("per_draw", {})
        term_names = [item["name"] for item in self.spec.get("likelihood", [])]
        built = {t.name for t in self.out.likelihood}
        for field_name, target in (("replicates", self.out.replicates),
                                   ("pointwise", self.out.pointwise)):
            for k, name in enumerate(per_draw.get(field_name, [])):
                if name not in term_names:
                    self.problem(pointer("model", "per_draw", field_name, k),
                                 f"per_draw {field_name}: '{name}' is not the name of a "
                                 "likelihood term")
                elif name in built:
                    target.append(name)
        for name, text in per_draw.get("formulas", {}).items():
            if name in self.broken:
                continue
            node = self.expression(text, pointer("model", "per_draw", "formulas", name),
                                   f"per-draw formula '{name}'")
            if node is not None:
                if self.out.graph.type_of(node).kind == "boolean":
                    self.problem(pointer("model", "per_draw", "formulas", name),
                                 f"per-draw formula '{name}' is a comparison; wrap it in "
                                 "select(condition, 1, 0)")
                    continue
                self.out.formulas[name] = node
        for k, item in enumerate(per_draw.get("predictions", [])):
            at = ("model", "per_draw", "predictions", k)
            context = f"prediction '{item['name']}'"
            distribution = self.distribution(item, at, context)
            if distribution is None or item["name"] in self.broken:
                continue
            args = self.arguments(item, at, context, distribution)
            if args is None:
                continue
            if not distribution.event_ndim:
                shapes = [self.out.graph.type_of(n).shape for n in args[1]]
                try:
                    batch_shape(dict(zip(args[0], shapes, strict=True)),
                                distribution.argument_event_ndim)
                except ValueError:
                    self.problem(pointer(*at, "arguments"),
                                 f"{context}: the arguments' shapes "
                                 f"{', '.join(describe(s) for s in shapes)} do not fit together")
                    continue
            # the draw's shape is settled by a trial draw when the model is compiled
            self.out.predictions.append(DistributionTerm(context, distribution, *args,
                                                         name=item["name"], at=pointer(*at)))


def assemble(spec: dict, data: Any, reparametrise: bool = True,
             ) -> tuple[list[Problem], Assembly]:
    """Build the graph and terms of a schema-valid spec; problems empty means it is usable.

    `reparametrise` allows the QR reparametrisation of linear predictors (reparametrisation.py).
    """
    assembler = _Assembler(spec, data, reparametrise)
    try:
        assembly = assembler.run()
    except BudgetExceeded:
        # The crossing expression's problem is recorded; checking the rest would be the very work
        # the budget refuses, and its findings would only follow from the parts left unbuilt.
        return assembler.problems, assembler.out
    return assembler.problems, assembly
