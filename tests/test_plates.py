"""Plate controls: percent activity and the Z'-factor."""

import numpy as np
import pandas as pd
import pytest

from inhibkin.errors import DataError
from inhibkin.rates.plates import Z_PRIME_THRESHOLD, percent_activity, plate_qc, z_prime

EXACT = 1e-12


def _plate(name, max_signal, min_signal, samples=()):
    rows = [{"plate": name, "role": "max", "signal": s} for s in max_signal]
    rows += [{"plate": name, "role": "min", "signal": s} for s in min_signal]
    rows += [{"plate": name, "role": "sample", "signal": s} for s in samples]
    return pd.DataFrame(rows)


def test_z_prime_worked_example_by_hand():
    # Zhang, Chung & Oldenburg (1999), J. Biomol. Screen. 4:67-73:
    # Z' = 1 - 3(sigma_p + sigma_n)/|mu_p - mu_n|.
    # max wells 98, 100, 102: mean 100, sample SD sqrt((4+0+4)/2) = 2.
    # min wells 9, 10, 11, 10: mean 10, sample SD sqrt((1+0+1+0)/3) = sqrt(2/3).
    # Z' = 1 - 3*(2 + sqrt(2/3))/90.
    expected = 1 - 3 * (2 + np.sqrt(2 / 3)) / 90
    assert z_prime([98, 100, 102], [9, 10, 11, 10]) == pytest.approx(expected, rel=EXACT)
    qc = plate_qc(_plate("P1", [98, 100, 102], [9, 10, 11, 10]))
    assert qc.table.loc["P1", "z_prime"] == pytest.approx(expected, rel=EXACT)
    assert not qc.table.loc["P1", "flagged"]


def test_noisy_plate_is_flagged_below_threshold():
    # max SD 10, min SD 10, window 90: Z' = 1 - 60/90 = 1/3 < 0.5.
    df = pd.concat([_plate("good", [98, 100, 102], [9, 10, 11]),
                    _plate("noisy", [90, 100, 110], [0, 10, 20])], ignore_index=True)
    qc = plate_qc(df)
    assert qc.table.loc["noisy", "z_prime"] == pytest.approx(1 - 60 / 90, rel=EXACT)
    assert qc.flagged == ("noisy",)
    assert Z_PRIME_THRESHOLD == 0.5
    assert "noisy" in qc.summary() and "noisy" in qc._repr_html_()
    assert list(qc.to_frame()["plate"]) == ["good", "noisy"]


def test_percent_activity_from_plate_means():
    df = pd.concat([_plate("A", [100, 100], [10, 10], samples=[55, 10, 100]),
                    _plate("B", [200, 200], [0, 0], samples=[50])], ignore_index=True)
    qc = plate_qc(df)
    pct = percent_activity(df, qc)
    samples = (df["role"] == "sample").to_numpy()
    np.testing.assert_allclose(pct[samples], [50.0, 0.0, 100.0, 25.0], rtol=EXACT)


def test_plate_without_controls_is_named():
    df = pd.concat([_plate("P1", [100, 101], [1, 2]), _plate("P2", [100, 99], [])],
                   ignore_index=True)
    with pytest.raises(DataError, match=r"column 'role'.*value 0.*plate 'P2' has 0 'min'"):
        plate_qc(df)
    lenient = plate_qc(df, strict=False)
    assert "P2" in lenient.unusable and "P1" not in lenient.unusable
    assert np.isnan(lenient.table.loc["P2", "z_prime"])


def test_table_without_any_control_wells():
    df = pd.DataFrame({"plate": ["P1"] * 3, "role": ["sample"] * 3, "signal": [1.0, 2, 3]})
    with pytest.raises(DataError, match=r"column 'role'.*'max'.*no 'max' control wells"):
        plate_qc(df)


def test_unknown_role_and_equal_controls():
    df = _plate("P1", [5, 5], [5, 5])
    with pytest.raises(DataError, match=r"column 'signal'.*value 5.0.*same mean"):
        plate_qc(df)
    odd = pd.DataFrame({"plate": ["P1"], "role": ["blank"], "signal": [1.0]})
    with pytest.raises(DataError, match=r"column 'role', row 0 \(value 'blank'\): unknown role"):
        plate_qc(odd)
