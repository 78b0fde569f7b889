"""The compiled model: log density and gradient on the unconstrained space, and per-draw reports."""

from __future__ import annotations

from typing import Any

import numpy as np

from ..problems import InvalidSubmission, Problem, pointer
from .assembly import Assembly, DistributionTerm
from .conditionals import Conditional, conditionals
from .shapes import batch_shape
from .summing import Summing
from .tape import Plan

# Failures a bad point can provoke inside numpy/scipy; the contract turns them into -inf.
_POINT_FAILURES = (ValueError, FloatingPointError, ZeroDivisionError, OverflowError)


def _draw(distribution: Any, args: dict, rng: np.random.Generator,
          shape: tuple[int, ...] | None) -> np.ndarray:
    """One draw of the given shape; scalars are drawn as length-1 vectors, since some of numpy's
    generators return a Python number rather than an array for a scalar shape."""
    if shape == () and distribution.event_ndim == 0:
        return np.asarray(distribution.sample(args, rng, (1,)), dtype=float).reshape(())
    return np.asarray(distribution.sample(args, rng, shape), dtype=float)


def _report_draw(distribution: Any, args: dict, rng: np.random.Generator,
                 shape: tuple[int, ...]) -> np.ndarray:
    """A draw for a report row, or NaNs where numpy's generator refuses the arguments (a Poisson
    rate beyond its range at an extreme draw): one odd draw must not stop a chain's report."""
    try:
        return _draw(distribution, args, rng, shape)
    except ValueError:
        return np.full(shape, np.nan)


def flat_names(name: str, shape: tuple[int, ...]) -> list[str]:
    """theta -> theta; theta[3]; L[2,1]: 1-based, row-major."""
    if not shape:
        return [name]
    return [f"{name}[{','.join(str(i + 1) for i in index)}]" for index in np.ndindex(*shape)]


class CompiledModel:
    """A spec and its data, compiled: see DEVELOPERS.md, "Compiled model"."""

    def __init__(self, assembly: Assembly):
        self._assembly = assembly
        graph = assembly.graph
        self.dimension = assembly.dimension
        self._slots = assembly.slots
        # Integer unknowns' values follow the continuous coordinates in a point: the sampler's
        # "point" is u (dimension values) then those (discrete_size values, whole numbers).
        self._held = list(assembly.held)
        held = tuple(self._held)
        self.discrete_size = sum(s.stop - s.start for s in self._held)
        self.point_size = self.dimension + self.discrete_size
        # Summed-out integer unknowns (worker/modeling/summing.py): their terms enter the density
        # as one log-sum-exp kernel each; report() draws their values after the point's.
        self._summing = Summing(graph, assembly.slots, self._held, assembly.summed,
                                assembly.integer_bounds, assembly.terms(), assembly.dimension,
                                self.point_size)
        if self._summing.problems:
            raise InvalidSubmission(self._summing.problems)
        self._density = Plan(graph, assembly.slots, self._summing.remaining, assembly.dimension,
                             constant=sum(q.log_jacobian_of_u for q in assembly.reparametrised),
                             held=held, kernels=tuple(self._summing.kernels))
        # an unknown's reported value: its slot's node, or beta = R*^-1 theta where reparametrised
        self._value_nodes = [graph.names[s.name]
                             for s in (*assembly.slots, *self._held, *self._summing.slots)]
        self._reparametrised = {q.unknown: q for q in assembly.reparametrised}
        report_nodes = (
            list(self._value_nodes)
            + list(assembly.derived.values())
            + list(assembly.formulas.values())
            # every term's arguments: the trial below evaluates priors and likelihood terms too
            + [n for t in (*assembly.priors, *assembly.likelihood, *assembly.predictions)
               for n in t.argument_nodes]
        )
        self._report = Plan(graph, assembly.slots, [], assembly.dimension,
                            extra_outputs=tuple(report_nodes),
                            held=(*held, *self._summing.slots))
        self._likelihood = {t.name: t for t in assembly.likelihood}
        self.unknown_names = [n for s in (*assembly.slots, *self._held)
                              for n in flat_names(s.name, s.shape)]
        self._prediction_shapes = self._trial()
        # Gibbs updates of the integer unknowns (worker/samplers/gibbs.py), one per unknown
        self.conditionals: list[Conditional] = conditionals(
            graph, assembly.slots, self._held, assembly.integer_bounds,
            [*assembly.priors, *assembly.likelihood], assembly.dimension)
        # summed-out unknowns' columns follow the unknowns' (they are not in a point)
        summed_names = [n for s in self._summing.slots for n in flat_names(s.name, s.shape)]
        names = list(self.unknown_names) + summed_names
        # Quantities whose every value is a whole number: integer unknowns, integer derived
        # quantities and formulas, and draws from discrete distributions; downloads give them an
        # integer type.
        integers: list[str] = [n for s in self._held for n in flat_names(s.name, s.shape)]
        integers += summed_names
        for name, node in (*assembly.derived.items(), *assembly.formulas.items()):
            flat = flat_names(name, graph.type_of(node).shape)
            names += flat
            if graph.type_of(node).kind == "integer":
                integers += flat
        for term, shape in zip(assembly.predictions, self._prediction_shapes, strict=True):
            flat = flat_names(term.name, shape)
            names += flat
            if term.distribution.discrete:
                integers += flat
        for name in assembly.replicates:
            flat = flat_names(f"replicate.{name}", self._likelihood[name].shape)
            names += flat
            if self._likelihood[name].distribution.discrete:
                integers += flat
        self.integer_quantities = frozenset(integers)
        for name in assembly.pointwise:
            term = self._likelihood[name]
            batch = term.shape[:len(term.shape) - term.distribution.event_ndim]
            names += flat_names(f"pointwise.{name}", batch)
        self.quantity_names = names

    @property
    def reparametrisation(self) -> dict[str, Any]:
        """For the sampler report: whether the QR reparametrisation was allowed, where it was
        applied and, for the other candidates, why not (JSON-able)."""
        a = self._assembly
        return {"enabled": a.reparametrise,
                "applied": [q.record() for q in a.reparametrised],
                "not_applied": [dict(s) for s in a.not_reparametrised]}

    def _trial(self) -> list[tuple[int, ...]]:
        """Evaluate every term once at u = 0 so that misfitting arguments surface as problems."""
        problems: list[Problem] = []
        u = self._summing.extended(self.lowest_point())
        for slot in self._summing.slots:
            u[slot.start:slot.stop] = self._assembly.integer_bounds[slot.name][0]
        values = self._report.values_at(u)
        for term in (*self._assembly.priors, *self._assembly.likelihood):
            try:
                with np.errstate(all="ignore"):
                    term.distribution.log_density_and_gradients(
                        values[term.variate], self._args(term, values),
                        frozenset(term.argument_names) | {"x"})
            except (ValueError, IndexError, TypeError) as error:
                problems.append(Problem(term.at + "/arguments",
                                        f"{term.label}: the arguments do not fit the "
                                        f"distribution {term.distribution.name} ({error})"))
        shapes: list[tuple[int, ...]] = []
        rng = np.random.default_rng(0)
        for term in self._assembly.predictions:
            try:
                args = self._args(term, values)
                shape = None
                if term.distribution.event_ndim == 0:
                    shape = batch_shape({n: np.shape(a) for n, a in args.items()},
                                        term.distribution.argument_event_ndim)
                with np.errstate(all="ignore"):
                    draw = _draw(term.distribution, args, rng, shape)
                shapes.append(tuple(np.shape(draw)))
            except (ValueError, IndexError, TypeError) as error:
                problems.append(Problem(term.at + "/arguments",
                                        f"{term.label}: the arguments do not fit the "
                                        f"distribution {term.distribution.name} ({error})"))
        if problems:
            raise InvalidSubmission(problems)
        return shapes

    def lowest_point(self) -> np.ndarray:
        """A point with every continuous coordinate 0 and every integer unknown at its lower
        bound (a point inside the support, for trials)."""
        point = np.zeros(self.point_size)
        for slot in self._held:
            point[slot.start:slot.stop] = self._assembly.integer_bounds[slot.name][0]
        return point

    @staticmethod
    def _args(term: DistributionTerm, values: list[Any]) -> dict[str, np.ndarray]:
        return {n: values[k] for n, k in zip(term.argument_names, term.argument_nodes,
                                             strict=True)}

    def memory_bytes(self) -> int:
        """Bytes of the arrays the compiled model holds (data, constants, kernels' buffers)."""
        seen: dict[int, int] = {}
        for plan in (self._density, self._report):
            for array in plan.arrays():
                base = array if array.base is None else array.base
                if isinstance(base, np.ndarray):
                    seen[id(base)] = base.nbytes
                else:
                    seen[id(array)] = array.nbytes
        return sum(seen.values())

    # ---- the sampler's interface
    def log_density(self, u: np.ndarray) -> float:
        try:
            return self._density.log_density(u)
        except _POINT_FAILURES:
            return -np.inf

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        try:
            return self._density.log_density_and_gradient(u)
        except _POINT_FAILURES:
            return -np.inf, np.zeros(self.dimension)

    def unconstrain(self, values: dict) -> np.ndarray:
        """Initial values by unknown name (constrained scale) -> u; raises InvalidSubmission.

        Pointers are relative to the mapping of values ("/mu"); the caller roots them.
        """
        problems: list[Problem] = []
        u = np.zeros(self.point_size)
        for slot in self._held:
            at = pointer(slot.name)
            lower, upper = self._assembly.integer_bounds[slot.name]
            if slot.name not in values:
                problems.append(Problem(at, f"no initial value given for unknown '{slot.name}'"))
                continue
            try:
                x = np.array(values[slot.name], dtype=float)
            except (ValueError, TypeError):
                x = np.array(np.nan)
            if x.shape != slot.shape or not np.all((x == np.round(x)) & (x >= lower)
                                                   & (x <= upper)):
                problems.append(Problem(at, f"the initial value of the integer unknown "
                                            f"'{slot.name}' must be whole numbers from {lower} "
                                            f"to {upper} in shape {list(slot.shape)}"))
                continue
            u[slot.start:slot.stop] = x.ravel()
        for slot in self._slots:
            at = pointer(slot.name)
            if slot.name not in values:
                problems.append(Problem(at, f"no initial value given for unknown '{slot.name}'"))
                continue
            try:
                x = np.array(values[slot.name], dtype=float)
            except (ValueError, TypeError):
                problems.append(Problem(at, f"the initial value of '{slot.name}' must be a number "
                                            "or a rectangular array of numbers"))
                continue
            if x.shape != slot.shape:
                problems.append(Problem(at, f"the initial value of '{slot.name}' has shape "
                                            f"{list(x.shape)} but the unknown has shape "
                                            f"{list(slot.shape)}"))
                continue
            with np.errstate(all="ignore"):
                piece = x.ravel() if slot.transform is None else slot.transform.unconstrain(x)
                if slot.name in self._reparametrised:
                    qr = self._reparametrised[slot.name]
                    piece = (qr.r_scaled @ piece - qr.centre) / qr.spread  # u from beta
            if not np.all(np.isfinite(piece)):
                problems.append(Problem(at, f"the initial value of '{slot.name}' lies outside "
                                            "the unknown's declared support"))
                continue
            u[slot.start:slot.stop] = piece
        if problems:
            raise InvalidSubmission(problems)
        return u

    def unconstrain_draws(self, rows: np.ndarray) -> np.ndarray:
        """Stored draws of the unknowns' columns (S, len(unknown_names)), constrained as report()
        gives them, back to the unconstrained scale (S, dimension); NaN where a value lies
        outside its support."""
        rows = np.asarray(rows, dtype=float)
        out = np.empty((rows.shape[0], self.point_size))
        # the integer unknowns' columns follow the continuous ones', as their values do in a point
        if self.discrete_size:
            out[:, self.dimension:] = rows[:, -self.discrete_size:]
        column = 0
        with np.errstate(all="ignore"):
            for slot in self._slots:
                size = int(np.prod(slot.shape, dtype=int))
                block = rows[:, column:column + size]
                column += size
                if slot.name in self._reparametrised:
                    qr = self._reparametrised[slot.name]  # u = (R* beta - centre) / spread
                    out[:, slot.start:slot.stop] = (block @ qr.r_scaled.T - qr.centre) / qr.spread
                    continue
                if slot.transform is None:
                    out[:, slot.start:slot.stop] = block
                    continue
                for s in range(rows.shape[0]):
                    out[s, slot.start:slot.stop] = slot.transform.unconstrain(
                        block[s].reshape(slot.shape))
        return out

    def report(self, u: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """One row of quantity_names at u; draws come from rng in a fixed order."""
        a = self._assembly
        # summed-out unknowns first, each from its full conditional given the point
        values = self._report.values_at(self._summing.draw(np.asarray(u, dtype=float), rng)
                                        if self._summing.slots else u)
        pieces: list[np.ndarray] = [np.ravel(values[n]) for n in self._value_nodes]
        pieces += [np.ravel(values[n]) for n in a.derived.values()]
        pieces += [np.ravel(values[n]) for n in a.formulas.values()]
        with np.errstate(all="ignore"):
            for term, shape in zip(a.predictions, self._prediction_shapes, strict=True):
                pieces.append(np.ravel(_report_draw(term.distribution, self._args(term, values),
                                                    rng, shape)))
            for name in a.replicates:
                term = self._likelihood[name]
                pieces.append(np.ravel(_report_draw(term.distribution, self._args(term, values),
                                                    rng, term.shape)))
            for name in a.pointwise:
                term = self._likelihood[name]
                pointwise = term.distribution.log_density(values[term.variate],
                                                          self._args(term, values))
                batch = term.shape[:len(term.shape) - term.distribution.event_ndim]
                pieces.append(np.ravel(np.broadcast_to(pointwise, batch)))
        if not pieces:
            return np.zeros(0)
        return np.concatenate([np.asarray(p, dtype=float) for p in pieces])
