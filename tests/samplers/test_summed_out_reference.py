"""The two-component normal mixture with its indicators summed out, against the exact posterior
by enumerating all 2^10 assignments (tests/samplers/test_integer_references.py: the model,
data and enumeration the compound sampler is checked against, reused here unchanged).

NUTS samples the two locations from the summed density alone; the indicators are drawn per
draw from their full conditional. Checks, as in that module: each row's membership probability
within 4 MCSE (batch means, TOLERANCE_MCSE), the rarer memberships together; the sds of both
locations as a Bonferroni family at level 0.01 (tests/samplers/quantile_checks.py).

Power (asserted on the run by power_shortfall): a 2 % error in an sd must move the estimate by
at least the family's critical value plus 2.33 standard errors (z about 2.81 + 2.33 = 5.14 for
two checks), so it is caught with probability at least 0.99. With se(sd) ~ sd sqrt((kurtosis -
1) / (4 ESS)) (delta method, common practice; kurtosis about 3 for these near-normal
locations), 0.02 sd / se(sd) >= 5.14 needs ESS >= 5.14^2 (kurtosis - 1) / (4 * 0.02^2), about
33,000. A trial run (4 chains x 3,000 draws, ESS about 12,000, the sd check's shift 2.1 se) put
NUTS's ESS near the number of draws, so 4 chains of 19,000 draws (76,000, shift about 5.3 se)
give the power with a little to spare.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.test_integer_references import check_mixture_draws, exact_mixture, mixture_body
from worker.runner import run_in_process


@pytest.mark.slow
def test_summed_out_mixture_matches_the_enumeration():
    exact = exact_mixture()
    body = mixture_body(chains=4, draws=19_000, seed=20261216)
    body["model"]["unknowns"]["z"]["summed_out"] = True
    result = run_in_process(body)
    names, draws = result["names"], result["draws"]
    assert "discrete_changes" not in result["stats"][0]  # no Gibbs step ran
    z = draws[:, :, [names.index(f"z[{i + 1}]") for i in range(len(exact["second_component"]))]]
    assert np.all((z == 1) | (z == 2))
    check_mixture_draws(result, exact)
    assert result["sampler"]["divergences"] == 0
