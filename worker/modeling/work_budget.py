"""The work one model may ask of checking and of every evaluation: a budget, refused by name.

Checking costs time in proportion to the nodes of the model's expressions, and one evaluation of
the log density costs time and memory in proportion to the elements of its intermediate values; a
submission could otherwise ask for any amount of either (three megabytes of sums, or a matrix
product of two long vectors). Both are counted as the graph is built, before any value is computed,
and the first expression that crosses a limit is the one refused.

The limits are our own choice. 20,000 expression nodes is a hundred times the largest hand-written
model in our examples and keeps the whole check near a second on one core (tests/bench prints the
rate); 10,000,000 elements in all intermediate values holds one evaluation under about 80 MB of
float64 and under about a tenth of a second of array work.
"""

from __future__ import annotations

from dataclasses import dataclass

from . import expressions as ex

MAX_GRAPH_NODES = 20_000
MAX_ELEMENTS = 10_000_000


class BudgetExceeded(Exception):
    """A limit of the work budget was crossed; the message names it and says what was asked."""


@dataclass
class WorkBudget:
    max_nodes: int = MAX_GRAPH_NODES
    max_elements: int = MAX_ELEMENTS
    nodes: int = 0
    elements: int = 0

    def charge_expression(self, tree: ex.Node) -> None:
        """Count a parsed expression's nodes, each of which becomes at most one graph node."""
        self.nodes += node_count(tree)
        if self.nodes > self.max_nodes:
            raise BudgetExceeded(
                f"the model's expressions reach {self.nodes} graph nodes, past this service's "
                f"work budget of {self.max_nodes} graph nodes per model; simplify the model or "
                "use vector inputs and operations instead of long sums"
            )

    def charge_elements(self, count: int) -> None:
        """Count the elements of one intermediate value before it is computed."""
        self.elements += count
        if self.elements > self.max_elements:
            raise BudgetExceeded(
                f"the model's intermediate values reach {self.elements} elements, past this "
                f"service's work budget of {self.max_elements} elements per model"
            )


def node_count(tree: ex.Node) -> int:
    """Nodes of a syntax tree, walked on an explicit stack so depth cannot matter."""
    count = 0
    stack: list[ex.Node] = [tree]
    while stack:
        node = stack.pop()
        count += 1
        stack.extend(ex.children(node))
    return count
