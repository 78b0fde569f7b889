"""The work budget per model (worker/modeling/work_budget.py): graph nodes and elements.

Issue 13 item 2: a body of long sums took minutes of API CPU and was then accepted or refused. The
budget is counted while the graph is built, so the first expression past a limit is the one named,
and nothing after it is parsed. The spec is the eight-schools model (Rubin 1981, reprinted in BDA3
Table 5.2; from memory) with extra derived quantities of our own.
"""

import copy
import json

import pytest

from worker.modeling import check_model
from worker.modeling.work_budget import MAX_ELEMENTS, MAX_GRAPH_NODES

from .test_spec_problems import BASE, DATA

# "mu+mu+...+mu" with 3,300 terms: 3,300 names and 3,299 additions, 9,899 characters (under the
# 10,000-character limit of one expression).
TERMS = 3300
LONG_SUM = "+".join(["mu"] * TERMS)
NODES_PER_SUM = 2 * TERMS - 1


def with_sums(count: int) -> dict:
    spec = copy.deepcopy(BASE)
    for i in range(count):
        spec["derived"][f"sum{i}"] = LONG_SUM
    return spec


def test_sums_within_the_node_budget_are_accepted():
    count = (MAX_GRAPH_NODES - 100) // NODES_PER_SUM
    assert count >= 2
    assert check_model(with_sums(count), DATA) == []


def test_the_expression_that_crosses_the_node_budget_is_named_and_nothing_after_it():
    # The body: 300 quantities of 3,300 terms, about 3 MB of JSON.
    spec = with_sums(300)
    assert len(json.dumps(spec)) > 2_900_000
    problems = check_model(spec, DATA)
    first_over = next(k for k in range(300) if 5 + (k + 1) * NODES_PER_SUM > MAX_GRAPH_NODES)
    assert [p.pointer for p in problems] == [f"/model/derived/sum{first_over}"]
    assert f"work budget of {MAX_GRAPH_NODES} graph nodes" in problems[0].message


@pytest.mark.parametrize("length", [100, 4000])
def test_an_outer_product_past_the_element_budget_is_refused_before_it_is_computed(length):
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    spec["inputs"]["column"] = {"type": "real", "shape": [length, 1]}
    spec["inputs"]["row"] = {"type": "real", "shape": [1, length]}
    data["column"] = [[0.5]] * length
    data["row"] = [[0.25] * length]
    spec["derived"]["outer"] = "column @ row"
    spec["derived"]["shifted"] = "outer + mu"
    problems = check_model(spec, data)
    if length * length <= MAX_ELEMENTS // 2:
        assert problems == []
    else:
        assert [p.pointer for p in problems] == ["/model/derived/outer"]
        assert f"work budget of {MAX_ELEMENTS} elements" in problems[0].message
