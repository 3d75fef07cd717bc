"""Declared units: conversions, header parsing, and refusal of undeclared units."""

import numpy as np
import pandas as pd
import pytest

from inhibkin.display.text import ki_texts, ranking_ki_unit
from inhibkin.errors import UnitsError
from inhibkin.units import (
    CONCENTRATION_UNITS,
    column_unit,
    from_molar,
    header_column,
    molar_unit,
    normalise_unit,
    readable_units,
    resolve_units,
    restate_molar,
    split_unit,
    to_molar,
    to_seconds,
)

# SI prefixes milli 1e-3, micro 1e-6, nano 1e-9, pico 1e-12 (BIPM 2019, The International
# System of Units, 9th edition, Table 7); 1 min = 60 s and 1 h = 3600 s (same, Table 8).
SI_PREFIXES = {"M": 1.0, "mM": 1e-3, "uM": 1e-6, "µM": 1e-6, "μM": 1e-6, "nM": 1e-9,
               "pM": 1e-12}
EXACT = 1e-15


@pytest.mark.parametrize("unit, factor", SI_PREFIXES.items())
def test_to_molar_uses_si_prefixes(unit, factor):
    assert to_molar(250.0, unit) == pytest.approx(250.0 * factor, rel=EXACT)
    assert from_molar(to_molar(250.0, unit), unit) == pytest.approx(250.0, rel=EXACT)


def test_every_declared_unit_is_tested():
    assert set(CONCENTRATION_UNITS) == set(SI_PREFIXES)


def test_arrays_convert_elementwise():
    out = to_molar([1.0, 10.0, 100.0], "nM")
    np.testing.assert_allclose(out, [1e-9, 1e-8, 1e-7], rtol=EXACT)


@pytest.mark.parametrize("value, unit, seconds",
                         [(2.0, "min", 120.0), (1.5, "h", 5400.0), (250.0, "ms", 0.25),
                          (7.0, "s", 7.0)])
def test_to_seconds(value, unit, seconds):
    assert to_seconds(value, unit) == pytest.approx(seconds, rel=EXACT)


@pytest.mark.parametrize("header, expected",
                         [("inhibitor_nM", ("inhibitor", "nM")),
                          ("substrate_uM", ("substrate", "uM")),
                          ("substrate_µM", ("substrate", "µM")),
                          ("substrate (mM)", ("substrate", "mM")),
                          ("enzyme conc_pM", ("enzyme conc", "pM")),
                          ("rate", ("rate", None)),
                          ("compound_id", ("compound_id", None)),
                          # Brackets, as the column mapping reads them (issue 17, item 3).
                          ("S [µM]", ("S", "µM")),
                          ("inhibitor[nM]", ("inhibitor", "nM")),
                          ("substrate (mM]", ("substrate (mM]", None))])
def test_split_unit(header, expected):
    assert split_unit(header) == expected


def test_split_unit_time():
    assert split_unit("time_min", kind="time") == ("time", "min")
    assert split_unit("time_min") == ("time_min", None)


def test_both_micro_signs_are_one_unit():
    assert normalise_unit("µM") == normalise_unit("μM") == normalise_unit("uM") == "uM"


def test_unknown_unit_lists_the_known_ones():
    with pytest.raises(UnitsError, match="unknown concentration unit.*nM"):
        normalise_unit("ppm")


def test_resolve_from_headers():
    found = resolve_units(["compound", "substrate_uM", "inhibitor_nM", "rate"],
                          ["substrate", "inhibitor"])
    assert found == {"substrate": ("substrate_uM", "uM"), "inhibitor": ("inhibitor_nM", "nM")}


def test_resolve_from_option_and_full_header():
    found = resolve_units(["substrate", "inhibitor_nM"], ["substrate", "inhibitor_nM"],
                          units={"substrate": "mM"})
    assert found == {"substrate": ("substrate", "mM"), "inhibitor_nM": ("inhibitor_nM", "nM")}


def test_undeclared_units_are_refused_with_how_to_declare():
    with pytest.raises(UnitsError) as info:
        resolve_units(["substrate", "inhibitor", "rate"], ["substrate", "inhibitor"])
    # Every undeclared column is listed, not only the first.
    assert [p.column for p in info.value.problems] == ["substrate", "inhibitor"]
    assert "inhibitor_nM" in str(info.value) and "--units" in str(info.value)


def test_option_contradicting_header_is_refused():
    with pytest.raises(UnitsError, match="contradicts"):
        resolve_units(["inhibitor_nM"], ["inhibitor"], units={"inhibitor": "uM"})


def test_two_headers_for_one_concentration_are_refused():
    with pytest.raises(UnitsError, match="several columns"):
        resolve_units(["inhibitor_nM", "inhibitor_uM"], ["inhibitor"])


def test_missing_column_is_named():
    with pytest.raises(UnitsError, match="no column 'inhibitor'"):
        resolve_units(["substrate_uM"], ["inhibitor"])


@pytest.mark.parametrize(("columns", "name", "expected"), [
    (["substrate_uM", "rate"], "substrate", ("substrate_uM", "uM")),
    (["substrate (mM)", "rate"], "substrate", ("substrate (mM)", "mM")),
    (["substrate", "rate"], "substrate", ("substrate", None)),
    (["inhibitor_nM"], "inhibitor_nM", ("inhibitor_nM", "nM")),
    (["rate"], "substrate", ("substrate", None)),
])
def test_header_column_finds_the_column_and_its_unit(columns, name, expected):
    assert header_column(columns, name) == expected


def test_header_column_refuses_two_headers_for_one_name():
    with pytest.raises(UnitsError, match="several columns declare 'substrate'"):
        header_column(["substrate_uM", "substrate_mM"], "substrate")


@pytest.mark.parametrize("value, unit", [(3.6e-4, "µM"), (1e-3, "mM"), (2.5e-9, "nM"),
                                         (0.5, "mM"), (7e-13, "pM"), (3e-15, "pM")])
def test_a_concentration_is_written_in_the_unit_its_size_suggests(value, unit):
    """Issue 17, item 6: the unit in which the number reads at least 1."""
    assert molar_unit(value) == unit


def test_a_column_gets_the_unit_of_its_typical_value():
    assert column_unit([3e-8, 4e-7, 2e-6, np.nan, np.inf]) == "nM"
    assert column_unit([np.nan]) == "µM"


# Issue 17, item 6: one unit per column for people, chosen by magnitude.
@pytest.mark.parametrize("text, unit, expected", [
    ("3.05e-05 M [2.9e-05, 3.2e-05]", "uM", "30.5 µM [29, 32]"),
    ("> 1e-05 M", "nM", "> 10000 nM"),
    ("< 5e-10 M", "nM", "< 0.5 nM"),
    ("no inhibition detected up to 1e-05 M; Ki > 2.5e-06 M whatever the mechanism", "µM",
     "no inhibition detected up to 10 µM; Ki > 2.5 µM whatever the mechanism"),
    # Not a molar concentration: left as written.
    ("not determined within the tested range", "nM", "not determined within the tested range"),
    ("1 mM ATP, 50 MW", "nM", "1 mM ATP, 50 MW"),
])
def test_restate_molar_rewrites_every_molar_number(text, unit, expected):
    assert restate_molar(text, unit) == expected


def test_readable_units_give_each_molar_column_one_unit_in_its_header():
    ki = np.array([1.6e-9, 2.2e-6, np.nan, 4.1e-8])
    table = pd.DataFrame({"compound": ["a", "b", "c", "d"], "ki_M": ki,
                          "ki_low_M": ki * 0.9, "ki_high_M": ki * 1.1,
                          "ic50_M": [3e-5, 1e-5, np.nan, 2e-6],
                          "ki_reported": ["1.6e-09 M [1.44e-09, 1.76e-09]", "x", "", "y"]})
    out = readable_units(table)
    assert list(out.columns) == ["compound", "ki (nM)", "ki_low (nM)", "ki_high (nM)",
                                 "ic50 (µM)", "ki_reported"]
    np.testing.assert_allclose(out["ki_low (nM)"], ki * 0.9 / SI_PREFIXES["nM"], rtol=EXACT)
    np.testing.assert_allclose(out["ic50 (µM)"], table["ic50_M"] / SI_PREFIXES["uM"],
                               rtol=EXACT)
    assert out["ki_reported"][0] == "1.6 nM [1.44, 1.76]"
    assert list(table.columns)[1] == "ki_M"  # the input is not changed
    params = pd.DataFrame({"parameter": ["vmax", "km", "kic", "km", "alpha"],
                           "estimate": [100.0, 2e-5, 3e-9, 4e-5, 2.0],
                           "se": [1.0, 1e-6, 1e-10, 2e-6, 0.1]})
    out = readable_units(params)
    assert list(out["unit"]) == ["", "µM", "nM", "µM", ""]
    np.testing.assert_allclose(out["estimate"], [100.0, 20.0, 3.0, 40.0, 2.0], rtol=EXACT)
    np.testing.assert_allclose(out["se"], [1.0, 1.0, 0.1, 2.0, 0.1], rtol=EXACT)


def test_ki_texts_write_both_kinds_of_limit():
    """A 'Ki < x' limit (low 0) was written '> 0' by the report's ranking rows."""
    ranking = pd.DataFrame({"status": ["determined", "bound", "bound", "failed"],
                            "ki_M": [2e-9, np.nan, np.nan, np.nan],
                            "ki_low_M": [1e-9, 3e-6, 0.0, np.nan],
                            "ki_high_M": [4e-9, np.inf, 5e-10, np.nan],
                            "ki_reported": ["", "", "", "no constant"]})
    texts = [t for t, _ in ki_texts(ranking, "nM")]
    assert texts == ["2 [1, 4]", "> 3000", "< 0.5", "no constant"]
    assert ranking_ki_unit(ranking) == "nM"
