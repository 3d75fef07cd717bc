"""Smoke check of the plate-read study (benchmarks/reads_study.py) and its simulator.

The many-plate study runs under ``make validate``; here two plates of one truth go
through the whole flow, and the simulator's early rate is checked against the
steady-state law of dead-end inhibition (textbook; `from memory`).
"""

import numpy as np
import pandas as pd
import pytest
from grid_ode import READ_INTERVAL, Mechanism, product_curve

from benchmarks import reads_study

# Over the first read interval the substrate falls by < 0.1 % and the pre-steady state
# lasts ~1/(k1·S + k_1 + kcat) < 1 ms, so the mean rate matches the law to this.
EARLY_RATE_RTOL = 2e-3


@pytest.mark.parametrize("substrate, inhibitor", [(2.0, 0.0), (10.0, 4.0), (100.0, 8.0)])
def test_simulator_early_rate_is_the_steady_state_law(substrate, inhibitor):
    m = Mechanism(kic=1.0, kiu=5.0)
    rate = product_curve(m, substrate, inhibitor)(READ_INTERVAL)[6] / READ_INTERVAL
    law = m.vmax * substrate / (m.km * (1 + inhibitor / m.kic)
                                + substrate * (1 + inhibitor / m.kiu))
    assert rate == pytest.approx(law, rel=EARLY_RATE_RTOL)


def test_two_plates_run_through_every_route():
    records = [r for seed in (1, 2) for r in reads_study.fit_plate("competitive", seed)]
    assert [r["route"] for r in records] == list(reads_study.ROUTES) * 2
    assert {r["used"] for r in records} == {"relative", "rate_se + variance model",
                                            "closed form"}
    assert all(isinstance(r.get("kic_covered"), bool) for r in records)
    assert all(np.isfinite(r["kic_width"]) for r in records)
    table = reads_study.summary_table(pd.DataFrame(records))
    assert set(table["truth"]) == {"competitive", "all"}
    assert len(table) == 2 * len(reads_study.ROUTES)
    assert np.all(table["plates"] == 2)
