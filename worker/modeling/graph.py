"""The typed graph: every value of a model as a node with a kind, a shape and, if fixed, a value.

Nodes that depend on no unknown are folded to constants while the graph is built, so the evaluation
plan only repeats work that changes from one point to the next. Syntax trees are turned into nodes
without recursion (a post-order walk on an explicit stack), so tree depth cannot matter.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import expressions as ex
from . import operations as ops
from .shapes import (
    ShapeError,
    ValueType,
    arithmetic_kind,
    broadcast,
    describe,
    matrix_product_shape,
)
from .work_budget import WorkBudget


@dataclass
class GraphNode:
    operation: ops.Operation | None  # None for constants and unknowns' values
    inputs: tuple[int, ...]
    type: ValueType
    value: np.ndarray | None  # set exactly when the node is constant

    @property
    def constant(self) -> bool:
        return self.value is not None


class IndexRangeError(ex.ExpressionError):
    """An index input holds positions outside 1..n; points at the data when it names an input."""

    def __init__(self, message: str, position: int, data_name: str | None, first_bad: int):
        super().__init__(message, position)
        self.data_name = data_name
        self.first_bad = first_bad


class Graph:
    def __init__(self, budget: WorkBudget | None = None) -> None:
        self.budget = budget or WorkBudget()
        self.nodes: list[GraphNode] = []
        self.names: dict[str, int] = {}
        self.input_names: set[str] = set()
        # (data matrix node, coefficient node) -> the node that computes their product another
        # way: X @ beta as Q* @ u + Q* centre where beta is reparametrised (reparametrisation.py)
        self.products: dict[tuple[int, int], int] = {}
        # integer unknowns' nodes, and elements taken from them, with their declared bounds:
        # the only values that vary and may index (worker/samplers/compound.py holds them fixed
        # while the continuous unknowns move)
        self.integer_ranges: dict[int, tuple[int, int]] = {}

    # ---- building blocks
    def constant(self, value: np.ndarray, kind: str) -> int:
        value = np.array(value, dtype=bool if kind == "boolean" else float, order="C")
        self.nodes.append(GraphNode(None, (), ValueType(kind, value.shape), value))
        return len(self.nodes) - 1

    def leaf(self, type_: ValueType) -> int:
        self.nodes.append(GraphNode(None, (), type_, None))
        return len(self.nodes) - 1

    def operation(self, operation: ops.Operation, inputs: tuple[int, ...], type_: ValueType) -> int:
        # Before anything is computed: folding constants could otherwise build any size of array.
        self.budget.charge_elements(type_.size)
        nodes = [self.nodes[i] for i in inputs]
        value = None
        if all(n.constant for n in nodes):
            with np.errstate(all="ignore"):
                value = np.asarray(operation.forward(*[n.value for n in nodes]))
            value = np.array(value, dtype=bool if type_.kind == "boolean" else float, order="C")
        self.nodes.append(GraphNode(operation, inputs, type_, value))
        return len(self.nodes) - 1

    def type_of(self, node_id: int) -> ValueType:
        return self.nodes[node_id].type

    # ---- expressions
    def add_expression(self, tree: ex.Node) -> int:
        """Turn a syntax tree into graph nodes; raises ExpressionError with a position."""
        results: dict[int, int] = {}
        stack: list[tuple[ex.Node, bool]] = [(tree, False)]
        while stack:
            node, children_done = stack.pop()
            children = ex.children(node)
            if not children_done and children:
                stack.append((node, True))
                stack.extend((c, False) for c in reversed(children))
                continue
            try:
                results[id(node)] = self._combine(node, [results[id(c)] for c in children])
            except ShapeError as error:
                raise ex.ExpressionError(str(error), node.position) from None
        return results[id(tree)]

    def _combine(self, node: ex.Node, args: list[int]) -> int:
        if isinstance(node, ex.Number):
            return self.constant(np.asarray(node.value), "integer" if node.is_integer else "real")
        if isinstance(node, ex.Name):
            if node.name in self.names:
                return self.names[node.name]
            if node.name in ex.FUNCTIONS:
                raise ShapeError(f"'{node.name}' is a function; call it as {node.name}(...)")
            raise ShapeError(f"'{node.name}' is not a declared input, unknown or derived quantity")
        types = [self.type_of(a) for a in args]
        if isinstance(node, ex.Unary):
            t = types[0]
            if t.kind == "boolean":
                raise ShapeError("a comparison cannot be negated; use select(condition, a, b)")
            return self.operation(ops.NEGATE, (args[0],), t)
        if isinstance(node, ex.Binary):
            return self._binary(node.operator, args, types)
        if isinstance(node, ex.Call):
            return self._call(node.function, args, types)
        if isinstance(node, ex.Index):
            return self._index(node, args, types)
        if isinstance(node, ex.VectorLiteral | ex.MatrixLiteral):
            return self._literal(node, args, types)
        raise ShapeError("unsupported syntax")

    def _binary(self, operator: str, args: list[int], types: list[ValueType]) -> int:
        a, b = types
        if operator in ex.COMPARISONS:
            if "boolean" in (a.kind, b.kind):
                raise ShapeError("comparisons cannot be combined with other comparisons")
            shape = broadcast(a.shape, b.shape, f"comparison '{operator}'")
            return self.operation(ops.COMPARE[operator], tuple(args), ValueType("boolean", shape))
        kind = arithmetic_kind(a.kind, b.kind, operator)
        if operator == "@":
            shape = matrix_product_shape(a.shape, b.shape)
            if (args[0], args[1]) in self.products:
                return self.products[(args[0], args[1])]
            return self.operation(ops.BINARY["@"], tuple(args), ValueType("real", shape))
        shape = broadcast(a.shape, b.shape, f"operator '{operator}'")
        return self.operation(ops.BINARY[operator], tuple(args), ValueType(kind, shape))

    def _call(self, function: str, args: list[int], types: list[ValueType]) -> int:
        expected = 3 if function == "select" else 2 if function == "dot" else 1
        if len(args) != expected:
            raise ShapeError(
                f"{function}() takes {expected} argument{'s' if expected > 1 else ''}, "
                f"got {len(args)}"
            )
        if function == "select":
            c, a, b = types
            if c.kind != "boolean":
                raise ShapeError("the first argument of select must be a comparison such as x > 0")
            if "boolean" in (a.kind, b.kind):
                raise ShapeError("the second and third arguments of select must be numbers")
            shape = broadcast(a.shape, b.shape, "select")
            shape = broadcast(shape, c.shape, "select condition")
            kind = "integer" if a.kind == b.kind == "integer" else "real"
            return self.operation(ops.SELECT, tuple(args), ValueType(kind, shape))
        if any(t.kind == "boolean" for t in types):
            raise ShapeError(f"{function}() cannot take a comparison; use select(condition, a, b)")
        t = types[0]
        if function in ex.ELEMENTWISE_FUNCTIONS:
            return self.operation(ops.ELEMENTWISE[function], tuple(args),
                                  ValueType("real", t.shape))
        if function in ("sum", "mean"):
            if not t.shape:
                raise ShapeError(f"{function}() needs a vector or matrix, got a scalar")
            op = ops.SUM if function == "sum" else ops.MEAN
            kind = "integer" if function == "sum" and t.kind == "integer" else "real"
            return self.operation(op, tuple(args), ValueType(kind, ()))
        if function == "dot":
            a, b = types
            if len(a.shape) != 1 or a.shape != b.shape:
                raise ShapeError(
                    f"dot() needs two vectors of equal length, got {describe(a.shape)} and "
                    f"{describe(b.shape)}"
                )
            return self.operation(ops.DOT, tuple(args), ValueType("real", ()))
        if len(t.shape) != 1:
            raise ShapeError(f"{function}() needs a vector, got shape {describe(t.shape)}")
        op = {"softmax": ops.SOFTMAX, "log_softmax": ops.LOG_SOFTMAX,
              "running_sum": ops.RUNNING_SUM}[function]
        return self.operation(op, tuple(args), ValueType("real", t.shape))

    def _positions(self, node: ex.Node, index_id: int, length: int, axis: str) -> np.ndarray:
        """0-based positions from a 1-based index, checked against 1..length."""
        index = self.nodes[index_id]
        source = node.name if isinstance(node, ex.Name) else None
        label = f"'{source}'" if source else "the index"
        if index.type.kind == "boolean":
            raise ShapeError("a comparison cannot be used as an index")
        if not index.constant:
            raise ShapeError(f"{label} depends on unknowns; indices must be fixed by the data")
        if index.type.kind != "integer":
            raise ShapeError(f"{label} is real; indices must be integers (1-based)")
        positions = index.value.astype(np.int64)
        bad = (positions < 1) | (positions > length)
        if np.any(bad):
            first = int(np.flatnonzero(bad.ravel())[0])
            value = int(positions.ravel()[first])
            where = f" (at {source}[{first + 1}])" if source and positions.ndim else ""
            raise IndexRangeError(
                f"{label} has value {value}{where} but {axis} positions run from 1 to {length}",
                node.position, source if source in self.input_names else None, first,
            )
        return np.array(positions - 1, order="C")

    def _index(self, node: ex.Index, args: list[int], types: list[ValueType]) -> int:
        target, indices = types[0], args[1:]
        if not target.shape:
            raise ShapeError("a scalar cannot be indexed")
        if target.kind == "boolean":
            raise ShapeError("a comparison cannot be indexed")
        if any(not self.nodes[i].constant for i in indices):
            return self._index_by_unknown(node, args, target)
        made = self._index_by_data(node, args, target)
        if args[0] in self.integer_ranges:
            self.integer_ranges[made] = self.integer_ranges[args[0]]
        return made

    def _index_by_unknown(self, node: ex.Index, args: list[int], target: ValueType) -> int:
        """x[k] or X[k] where k varies: k must be an integer unknown (or elements of one) whose
        bounds lie inside the indexed axis."""
        if len(args) != 2:
            raise ShapeError("an index that is an integer unknown selects elements of a vector "
                             "or rows of a matrix, one index only")
        index = args[1]
        if index not in self.integer_ranges:
            raise ShapeError("an index that depends on unknowns must be an integer unknown or "
                             "elements of one (indices are otherwise fixed by the data)")
        low, high = self.integer_ranges[index]
        length = target.shape[0]
        if low < 1 or high > length:
            axis = "vector" if len(target.shape) == 1 else "row"
            raise ShapeError(f"the index takes values {low} to {high} (its declared bounds) but "
                             f"{axis} positions run from 1 to {length}")
        if len(target.shape) == 2 and len(self.type_of(index).shape) > 1:
            raise ShapeError("rows of a matrix are selected by a scalar or a vector of indices")
        shape = self.type_of(index).shape + target.shape[1:]
        made = self.operation(ops.TakeByUnknown(target.shape), (args[0], index),
                              ValueType(target.kind, shape))
        if args[0] in self.integer_ranges:
            self.integer_ranges[made] = self.integer_ranges[args[0]]
        return made

    def _index_by_data(self, node: ex.Index, args: list[int], target: ValueType) -> int:
        indices = args[1:]
        if len(target.shape) == 1:
            if len(indices) != 1:
                raise ShapeError("a vector takes one index")
            positions = self._positions(node.indices[0], indices[0], target.shape[0], "vector")
            op = ops.TakeElements(positions, target.shape[0])
            return self.operation(op, (args[0],), ValueType(target.kind, positions.shape))
        rows, cols = target.shape
        if len(indices) == 1:
            positions = self._positions(node.indices[0], indices[0], rows, "row")
            if positions.ndim > 1:
                raise ShapeError("rows of a matrix are selected by a scalar or a vector of indices")
            op = ops.TakeRows(positions, (rows, cols))
            return self.operation(op, (args[0],), ValueType(target.kind, positions.shape + (cols,)))
        r = self._positions(node.indices[0], indices[0], rows, "row")
        c = self._positions(node.indices[1], indices[1], cols, "column")
        if r.shape != c.shape:
            raise ShapeError(
                f"row and column indices must have the same shape, got {describe(r.shape)} and "
                f"{describe(c.shape)}"
            )
        op = ops.TakeMatrixElements(r * cols + c, (rows, cols))
        return self.operation(op, (args[0],), ValueType(target.kind, r.shape))

    def _literal(self, node: ex.Node, args: list[int], types: list[ValueType]) -> int:
        if any(t.shape or t.kind == "boolean" for t in types):
            raise ShapeError("vector and matrix literals are built from scalars")
        if isinstance(node, ex.MatrixLiteral):
            widths = {len(row) for row in node.rows}
            if len(widths) != 1:
                raise ShapeError("every row of a matrix literal needs the same number of entries")
            shape: tuple[int, ...] = (len(node.rows), widths.pop())
        else:
            shape = (len(args),)
        kind = "integer" if all(t.kind == "integer" for t in types) else "real"
        return self.operation(ops.Stack(shape), tuple(args), ValueType(kind, shape))

