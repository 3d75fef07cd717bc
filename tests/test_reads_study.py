"""Smoke check of the plate-read study (benchmarks/reads_study.py) and its simulator.

The many-plate study runs under ``make validate``; here two plates of one truth go
through the whole flow, and the simulator's early rate is checked against the
steady-state law of dead-end inhibition (textbook; `from memory`). Three rapid-equilibrium
plates of the study keep their grids free of the rates stage's ``time_dependent`` flag.
"""

import numpy as np
import pandas as pd
import pytest
from grid_ode import READ_INTERVAL, Mechanism, plate, product_curve

import inhibkin as ik
from benchmarks import reads_study
from inhibkin.core.compare import TIME_DEPENDENT

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


# Reads-study plates (rapid-equilibrium mass action, 3 % read noise), each of which an
# inhibited well or two of flagged `time_dependent` before the flag tested the slopes
# themselves (inhibkin/rates/time_dependence.py); the competitive one had two flagged
# wells, and its grid was called time_dependent.
RAPID_PLATES = [("competitive", 20261230), ("noncompetitive", 20263218), ("mixed", 20264215)]


@pytest.fixture(scope="session")
def rapid_rates():
    """The default route's rates tables (linear method) of RAPID_PLATES, read once."""
    tables = {}
    for truth, seed in RAPID_PLATES:
        reads, plate_map = plate(reads_study.TRUTHS[truth], seed)
        tables[truth] = ik.initial_rates(reads, plate_map,
                                         conversion=ik.BeerLambert(reads_study.EPSILON),
                                         **reads_study.COLUMNS).table
    return tables


@pytest.mark.parametrize("truth", [t for t, _ in RAPID_PLATES])
def test_rapid_equilibrium_reads_are_not_time_dependent(rapid_rates, truth):
    table = rapid_rates[truth]
    flagged = table["flags"].fillna("").str.contains("time_dependent")
    assert not flagged.any()
    fit = ik.fit_mechanisms(table, **reads_study.COLUMNS)
    assert fit.verdict != TIME_DEPENDENT
