"""A small body may declare a huge shape; the checks refuse it before any array is built."""

from worker.modeling import check_model
from worker.modeling.data_checks import MAX_ELEMENTS


def test_huge_declared_shapes_are_problems_not_allocations() -> None:
    spec = {
        "inputs": {"n": {"type": "integer"}},
        "unknowns": {
            "factor": {"shape": ["n", "n"], "structure": "correlation_factor"},
            "z": {"shape": [MAX_ELEMENTS + 1]},
        },
        "priors": [
            {"on": "factor", "distribution": "lkj_correlation_factor",
             "arguments": {"concentration": 2}},
            {"on": "z", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        ],
        "likelihood": [],
    }
    problems = check_model(spec, {"n": 10**8})
    pointers = {p.pointer for p in problems}
    assert {"/model/unknowns/factor/shape", "/model/unknowns/z/shape"} <= pointers
    assert all("elements" in p.message for p in problems if p.pointer.endswith("/shape"))
