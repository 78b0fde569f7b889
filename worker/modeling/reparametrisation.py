"""Automatic QR reparametrisation of a linear predictor `X @ beta` with data X.

With the thin QR decomposition X = Q R (Golub & Van Loan 2013, Matrix Computations, 4th ed.,
section 5.2) scaled as Q* = Q sqrt(n - 1) and R* = R / sqrt(n - 1), X beta = Q* theta with
theta = R* beta. The sampler moves theta, whose likelihood is well conditioned however collinear
or badly scaled the columns of X are (Q*'Q* = (n - 1) I); beta = R*^-1 theta is what every prior,
report and summary sees. The map is linear, so its Jacobian |det R*^-1| is a constant, added to the
log density as such. This is the reparametrisation of regression coefficients described for
regression posteriors in BDA3 (Gelman et al. 2013, chapter 14) with the sqrt(n - 1) scaling that
keeps theta on the scale of the data.

It is applied to an unknown only when the engine can carry it through unchanged: an unbounded
vector with no structure, every use of which in the log density (derived quantities, prior and
likelihood arguments) is `X @ beta` with one and the same data matrix X of full column rank with
more rows than columns; priors *on* beta are evaluated at beta itself, and per-draw formulas and
predictions may use beta freely (they read its value). A constant column in X (an intercept) is
orthogonalised against the others by the decomposition itself, which is what centring the other
columns would do; an intercept added outside the product is left on its own scale.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy.linalg import solve_triangular

from . import expressions as ex
from .data_checks import InputValue


@dataclass(frozen=True)
class QrReparametrisation:
    """The sampled coordinates are u = (theta - centre) / spread: beta = r_inverse @ (centre +
    spread u) in the log density, and X @ beta is computed as (spread q_scaled) @ u +
    q_scaled @ centre."""

    unknown: str
    matrix: str
    q_scaled: np.ndarray
    r_scaled: np.ndarray
    r_inverse: np.ndarray
    log_jacobian: float          # log |det d beta / d theta|
    condition_number: float      # of X, for the report
    centre: np.ndarray           # theta at u = 0
    centred_on: str | None       # the observed input whose least-squares fit is the centre
    spread: float                # theta moves spread per unit of u

    @property
    def log_jacobian_of_u(self) -> float:
        """log |det d beta / d u|."""
        return self.log_jacobian + len(self.centre) * math.log(self.spread)

    def record(self) -> dict[str, Any]:
        return {"unknown": self.unknown, "data": self.matrix, "method": "thin QR",
                "condition_number": self.condition_number, "centred_on": self.centred_on,
                "spread": self.spread}


def _density_expressions(spec: dict) -> list[ex.Node]:
    """Parsed expressions that enter the log density; ones that do not parse are reported by the
    assembly and cannot make a use count here."""
    texts = list(spec.get("derived", {}).values())
    for section in ("priors", "likelihood"):
        for item in spec.get(section, []):
            texts += [v for v in item["arguments"].values() if isinstance(v, str)]
    trees = []
    for text in texts:
        try:
            trees.append(ex.parse(text))
        except ex.ExpressionError:
            continue
    return trees


def plan(spec: dict, inputs: dict[str, InputValue], enabled: bool,
         ) -> tuple[list[QrReparametrisation], list[dict[str, str]]]:
    """Which unknowns to reparametrise, and for the other candidates (unknowns used as
    `input @ unknown` somewhere) why not."""
    trees = _density_expressions(spec)
    applied: list[QrReparametrisation] = []
    skipped: list[dict[str, str]] = []
    declared_inputs = spec.get("inputs", {})
    for name, declared in spec["unknowns"].items():
        partners = [p for tree in trees for p in ex.matrix_product_partners(tree, name)]
        matrices = {p for p in partners if p in declared_inputs}
        if not matrices:
            continue

        def skip(reason: str, unknown: str = name) -> None:
            skipped.append({"unknown": unknown, "reason": reason})

        if not enabled:
            skip("turned off by the sampler setting reparametrise: false")
        elif any(k in declared for k in ("lower", "upper", "structure")):
            skip(f"'{name}' has bounds or a structure")
        elif len(declared.get("shape", [])) != 1:
            skip(f"'{name}' is not a vector")
        elif len(matrices) > 1:
            skip(f"'{name}' multiplies more than one data matrix ({', '.join(sorted(matrices))})")
        elif any(p not in matrices for p in partners):
            skip(f"'{name}' is used in the log density other than as "
                 f"{next(iter(matrices))} @ {name}")
        else:
            matrix = next(iter(matrices))
            found = _decompose(name, matrix, inputs.get(matrix))
            if isinstance(found, str):
                skip(found)
            else:
                applied.append(_centred(found, spec, inputs))
    return applied, skipped


# location-scale families: their location is on the scale of the data
_LOCATION_FAMILIES = ("normal", "student_t", "cauchy", "laplace", "logistic")


def _summands(node: ex.Node, derived: dict[str, str]) -> list[ex.Node]:
    """The top-level terms of a sum a + b + ... (differences kept whole), looking through names
    of derived quantities (each at most once, so a cycle cannot loop)."""
    found: list[ex.Node] = []
    stack, expanded = [node], set()
    while stack:
        n = stack.pop()
        if isinstance(n, ex.Binary) and n.operator == "+":
            stack.extend((n.left, n.right))
        elif isinstance(n, ex.Name) and n.name in derived and n.name not in expanded:
            expanded.add(n.name)
            try:
                stack.append(ex.parse(derived[n.name]))
            except ex.ExpressionError:
                continue
        else:
            found.append(n)
    return found


def _centred(qr: QrReparametrisation, spec: dict,
             inputs: dict[str, InputValue]) -> QrReparametrisation:
    """Put u = 0 at the least-squares fit of the observed data where X @ beta is a summand of a
    location-scale likelihood's location: only the origin of the sampled coordinates moves (the
    posterior is unchanged), so that a start near u = 0 is near the data however large the
    response's values (a regression on raw data in the tens of thousands would otherwise start
    hundreds of posterior standard deviations away)."""
    n = qr.q_scaled.shape[0]
    for item in spec.get("likelihood", []):
        location = item["arguments"].get("location")
        observed = inputs.get(item["observed"])
        if (item["distribution"] not in _LOCATION_FAMILIES or not isinstance(location, str)
                or observed is None or observed.shape != (n,)):
            continue
        try:
            terms = _summands(ex.parse(location), spec.get("derived", {}))
        except ex.ExpressionError:
            continue
        if any(isinstance(t, ex.Binary) and t.operator == "@" and isinstance(t.left, ex.Name)
               and t.left.name == qr.matrix and isinstance(t.right, ex.Name)
               and t.right.name == qr.unknown for t in terms):
            # least squares in theta: Q*'Q* = (n - 1) I, so theta_hat = Q*'y / (n - 1)
            y = observed.value
            centre = qr.q_scaled.T @ y / (n - 1)
            # theta's posterior sd is about sigma / sqrt(n - 1) (Q*'Q* = (n - 1) I); with the
            # residual sd s of the fit for sigma, u has a posterior sd near 1 in every direction,
            # the scale warm-up starts from and the one its metric estimates shrink toward
            k = len(centre)
            residual = y - qr.q_scaled @ centre
            s = math.sqrt(float(residual @ residual) / (n - k)) if n > k else 0.0
            spread = s / math.sqrt(n - 1) if s > 0.0 and math.isfinite(s) else 1.0
            return replace(qr, centre=centre, centred_on=item["observed"], spread=spread)
    return qr


def _decompose(name: str, matrix: str, value: InputValue | None) -> QrReparametrisation | str:
    """The scaled thin QR of the data matrix, or the reason it cannot be used."""
    if value is None or len(value.shape) != 2:
        return f"'{matrix}' is not a matrix of data"
    x = value.value
    n, k = x.shape
    if n <= k:
        return f"'{matrix}' has {n} rows for {k} columns; the decomposition needs more rows"
    singular = np.linalg.svd(x, compute_uv=False)
    # numpy's rank rule (matrix_rank's default tolerance): singular values below this are zero
    if singular[-1] <= singular[0] * max(n, k) * np.finfo(float).eps:
        return f"the columns of '{matrix}' are linearly dependent"
    q, r = np.linalg.qr(x, mode="reduced")
    # a positive diagonal makes the factor unique (Golub & Van Loan, theorem 5.2.3)
    signs = np.sign(np.diagonal(r))
    q, r = q * signs, r * signs[:, None]
    root = math.sqrt(n - 1)
    q_scaled, r_scaled = q * root, r / root
    r_inverse = solve_triangular(r_scaled, np.eye(k), lower=False)
    return QrReparametrisation(
        unknown=name, matrix=matrix, q_scaled=np.ascontiguousarray(q_scaled),
        r_scaled=r_scaled, r_inverse=np.ascontiguousarray(r_inverse),
        log_jacobian=-float(np.sum(np.log(np.diagonal(r_scaled)))),
        condition_number=float(singular[0] / singular[-1]), centre=np.zeros(k), centred_on=None,
        spread=1.0)
