"""Inputs: declared shapes resolved against the data, and the data checked against its declaration.

Each input yields at most a few problems however large it is: the count of bad values and the first
one, with a pointer to that element, rather than one record per element.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from ..problems import Problem, pointer
from .shapes import Shape, describe


@dataclass(frozen=True)
class InputValue:
    name: str
    kind: str  # "integer" | "real"
    shape: Shape
    value: np.ndarray  # contiguous float64 with exactly ``shape``


def flat_label(name: str, flat_index: int, shape: Shape) -> str:
    """The user's 1-based name for one element, e.g. y[4] or X[2,3]."""
    if not shape:
        return name
    position = np.unravel_index(flat_index, shape)
    return f"{name}[{','.join(str(int(p) + 1) for p in position)}]"


def element_pointer(root: tuple[str, ...], flat_index: int, shape: Shape) -> str:
    """A JSON pointer to one element; JSON array positions are 0-based (RFC 6901)."""
    position = np.unravel_index(flat_index, shape) if shape else ()
    return pointer(*root, *(int(p) for p in position))


# Largest number of elements one declared input or unknown may have (400 MB of float64).
MAX_ELEMENTS = 50_000_000


class DimensionTable:
    """Sizes that shapes may name: scalar integer inputs with valid data."""

    def __init__(self, declarations: dict[str, dict], sizes: dict[str, int]):
        self.declarations = declarations
        self.sizes = sizes

    def resolve(self, shape_spec: list, at: tuple[str, ...], problems: list[Problem],
                what: str) -> Shape | None:
        """Shape as a tuple of ints, or None after recording why it cannot be resolved."""
        dims: list[int] = []
        ok = True
        for k, entry in enumerate(shape_spec):
            here = pointer(*at, k)
            if isinstance(entry, bool) or not isinstance(entry, int | str | float):
                problems.append(Problem(here, f"{what}: a shape entry must be a whole number or "
                                              "the name of an integer input"))
                ok = False
            elif not isinstance(entry, str):
                dims.append(int(entry))
            elif entry not in self.declarations:
                problems.append(Problem(here, f"{what}: the shape names '{entry}', which is not a "
                                              "declared input"))
                ok = False
            else:
                declared = self.declarations[entry]
                if declared.get("type") != "integer" or declared.get("shape"):
                    problems.append(Problem(here, f"{what}: the shape names '{entry}', which must "
                                                  "be a scalar integer input"))
                    ok = False
                elif entry not in self.sizes:
                    ok = False  # its own data problem is already reported
                elif self.sizes[entry] < 1:
                    problems.append(Problem(pointer("data", entry),
                                            f"{what}: the size '{entry}' is "
                                            f"{self.sizes[entry]} but sizes must be at least 1"))
                    ok = False
                else:
                    dims.append(self.sizes[entry])
        # A declared shape can be huge even when the body is small (a size input of 10**15); refuse
        # it here, before any array of that size is built.
        if ok and int(np.prod([max(d, 0) for d in dims], dtype=object)) > MAX_ELEMENTS:
            problems.append(Problem(pointer(*at), f"{what}: the shape {list(dims)} has more than "
                                                  f"{MAX_ELEMENTS:,} elements"))
            ok = False
        return tuple(dims) if ok else None


_is_number_or_null = np.frompyfunc(
    lambda v: v is None or (isinstance(v, int | float | np.integer | np.floating)
                            and not isinstance(v, bool)), 1, 1)


def _as_array(raw: Any) -> np.ndarray | None:
    if raw is None or isinstance(raw, str | dict):
        return None
    try:
        array = np.array(raw, dtype=float)
    except (ValueError, TypeError):
        return None
    # float() also takes "0.5" and True; data must hold JSON numbers (or null, reported below).
    if not np.all(_is_number_or_null(np.array(raw, dtype=object))):
        return None
    return array


def check_inputs(declarations: dict[str, dict], data: dict) -> tuple[
        list[Problem], dict[str, InputValue], DimensionTable]:
    """Every problem with the data, the valid inputs, and the table of named sizes."""
    problems: list[Problem] = []
    if not isinstance(data, dict):
        return [Problem("/data", "the data must be an object mapping input names to values")], {}, \
            DimensionTable(declarations, {})
    for name in data:
        if name not in declarations:
            problems.append(Problem(pointer("data", name),
                                    f"data '{name}' is given but no input of that name is "
                                    "declared"))
    arrays: dict[str, np.ndarray] = {}
    for name, declared in declarations.items():
        at = ("data", name)
        if name not in data:
            problems.append(Problem(pointer(*at), f"no data given for input '{name}'"))
            continue
        array = _as_array(data[name])
        if array is None:
            problems.append(Problem(pointer(*at), f"data '{name}' must be a number or a "
                                                   "rectangular array of numbers"))
            continue
        declared_ndim = len(declared.get("shape", []))
        if array.ndim != declared_ndim:
            kinds = {0: "a scalar", 1: "a vector", 2: "a matrix"}
            problems.append(Problem(pointer(*at),
                                    f"data '{name}' is {kinds.get(array.ndim, 'an array')} but the "
                                    f"input is declared as {kinds[declared_ndim]}"))
            continue
        bad = ~np.isfinite(array)
        ok = True
        if np.any(bad):
            first = int(np.flatnonzero(bad.ravel())[0])
            problems.append(Problem(
                element_pointer(at, first, array.shape),
                f"data '{name}' holds {int(bad.sum())} value(s) that are not finite numbers "
                f"(NaN, infinity or null), the first at {flat_label(name, first, array.shape)}",
            ))
            ok = False
        if declared["type"] == "integer":
            fractional = ~bad & (array != np.round(array))
            if np.any(fractional):
                first = int(np.flatnonzero(fractional.ravel())[0])
                problems.append(Problem(
                    element_pointer(at, first, array.shape),
                    f"input '{name}' is declared integer but holds {int(fractional.sum())} "
                    f"non-whole value(s), the first {flat_label(name, first, array.shape)} = "
                    f"{array.ravel()[first]:g}",
                ))
                ok = False
        if not ok:
            continue
        arrays[name] = array
    sizes = {
        name: int(array)
        for name, array in arrays.items()
        if declarations[name]["type"] == "integer" and array.ndim == 0
    }
    table = DimensionTable(declarations, sizes)
    values: dict[str, InputValue] = {}
    for name, array in arrays.items():
        declared = declarations[name]
        shape = table.resolve(declared.get("shape", []), ("model", "inputs", name, "shape"),
                              problems, f"input '{name}'")
        if shape is None:
            continue
        if array.shape != shape:
            problems.append(Problem(pointer("data", name),
                                    f"data '{name}' has shape {describe(array.shape)} but the "
                                    "input "
                                    f"is declared with shape {describe(shape)}"))
            continue
        if _bounds_ok(name, declared, array, sizes, problems):
            values[name] = InputValue(name, declared["type"], shape,
                                      np.array(array, dtype=float, order="C"))
    return problems, values, table


def _bounds_ok(name: str, declared: dict, array: np.ndarray, sizes: dict[str, int],
               problems: list[Problem]) -> bool:
    ok = True
    for side in ("lower", "upper"):
        if side not in declared:
            continue
        bound = declared[side]
        if isinstance(bound, str):
            if bound not in sizes:
                problems.append(Problem(pointer("model", "inputs", name, side),
                                        f"input '{name}': the {side} bound names '{bound}', which "
                                        "must be a scalar integer input with valid data"))
                ok = False
                continue
            bound = sizes[bound]
        outside = array < bound if side == "lower" else array > bound
        if np.any(outside):
            first = int(np.flatnonzero(outside.ravel())[0])
            relation = "below the lower" if side == "lower" else "above the upper"
            problems.append(Problem(
                element_pointer(("data", name), first, array.shape),
                f"data '{name}' holds {int(outside.sum())} value(s) {relation} bound {bound:g}, "
                f"the first {flat_label(name, first, array.shape)} = {array.ravel()[first]:g}",
            ))
            ok = False
    return ok
