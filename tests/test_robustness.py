"""Hostile input, property by property: the only outcomes allowed are a correct result or
an InhibkinError whose message names what is wrong. No other exception type, no
foreign warning (numpy/scipy/pandas warnings are counted and must be zero), at most a
few of inhibkin's own warnings per call, and every fit ends (each has an iteration
bound; the example counts here are bounded so the file runs in about a minute)."""

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from inhibkin.campaign import STATUSES, fit_campaign
from inhibkin.cli import main
from inhibkin.display.text import format_estimate
from inhibkin.errors import DataError, InhibkinError, InhibkinWarning
from inhibkin.inputs.io import read_table, write_table
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.mechanism.one_model import fit_michaelis_menten
from inhibkin.potency.conversion import cheng_prusoff
from inhibkin.potency.curve import fit_dose_response
from inhibkin.potency.morrison import fit_morrison
from inhibkin.potency.table import potency_table
from inhibkin.rates.initial import initial_rates
from inhibkin.rates.plates import plate_qc
from inhibkin.simulate import simulate_campaign, simulate_grid

# Bounded example counts: the whole file must stay within a minute or two on one core.
FEW = settings(max_examples=50, deadline=None,
               suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
SOME = settings(max_examples=120, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
MANY = settings(max_examples=300, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
# More than this many of inhibkin's own warnings from one call is spam.
MAX_OWN_WARNINGS = 3
VERDICTS = ("none", "competitive", "uncompetitive", "noncompetitive", "mixed", "ambiguous",
            "failed")
# Scale equivariance: rescaled data give the same fit up to the optimiser's tolerance.
SCALE_RTOL = 1e-4
# Concentrations in M from the range.
TINY_M, HUGE_M = 1e-15, 1e3

# ---------------------------------------------------------------- strategies

hostile_number = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -1.0, -0.0, TINY_M, HUGE_M, 1e300, 5e-324, 1e-9]),
    st.floats(TINY_M, HUGE_M),
    st.integers(-5, 10**20),
)
hostile_cell = st.one_of(hostile_number, st.text(max_size=4), st.none(), st.booleans())
good_number = st.floats(TINY_M, HUGE_M)
hostile_id = st.one_of(
    st.text(max_size=8),
    st.sampled_from(["<script>alert(1)</script>", "'; DROP TABLE x;--", "../../etc/passwd",
                     "\x00", "é中文🧪", "=cmd|' /C calc'!A0", "{0}", "%s%n", "CPD-X"]),
    st.integers(), st.floats(allow_nan=False),
)


def column(cells, n):
    return st.lists(cells, min_size=n, max_size=n)


@st.composite
def hostile_table(draw, columns, *, max_rows=24):
    """A table with some columns missing, some hostile, an extra column, duplicated rows."""
    n = draw(st.integers(0, max_rows))
    data = {}
    for name in columns:
        kind = draw(st.integers(0, 9))
        if kind == 0:
            continue  # a missing column
        data[name] = draw(column(hostile_cell if kind < 4 else good_number, n))
    if draw(st.booleans()):
        data["notes"] = draw(column(st.text(max_size=3), n))
    frame = pd.DataFrame(data, index=range(n))
    if n and draw(st.booleans()):
        frame = pd.concat([frame, frame.iloc[: draw(st.integers(1, n))]])
    return frame


def outcome(function, *args, **options):
    """Call ``function``; return its result or the InhibkinError it raised, after checking
    that nothing else escaped and no warning spam was emitted."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = function(*args, **options)
        except InhibkinError as err:
            assert str(err).strip(), "an InhibkinError without a message"
            result = err
    foreign = [f"{w.category.__name__}: {w.message}" for w in caught
               if not issubclass(w.category, InhibkinWarning)]
    assert not foreign, foreign
    assert len(caught) <= MAX_OWN_WARNINGS, [str(w.message) for w in caught]
    return result


def _valid_grid(seed, *, n=None):
    s = np.geomspace(2.0, 200.0, 6)
    i = np.linspace(0.0, 40.0, 4)
    return simulate_grid("competitive", vmax=10.0, km=20.0, kic=8.0, kiu=8.0, s=s, i=i,
                         cv=0.03, seed=seed)


# ---------------------------------------------------------------- single fits


@MANY
@given(st.lists(hostile_cell, max_size=12), st.lists(hostile_cell, max_size=12))
def test_michaelis_menten_on_hostile_arrays(s, v):
    n = min(len(s), len(v))
    result = outcome(fit_michaelis_menten, s[:n], v[:n], intervals="wald")
    if not isinstance(result, InhibkinError):
        params = result.params
        assert set(params.index) == {"vmax", "km"}
        # A number reported as determined is a finite positive number with an interval
        # around it.
        for _, row in params[params["determined"]].iterrows():
            assert 0 < row["ci_low"] <= row["estimate"] <= row["ci_high"] < np.inf


@MANY
@given(st.lists(hostile_cell, max_size=12), st.lists(hostile_cell, max_size=12),
       st.booleans())
def test_dose_response_on_hostile_arrays(conc, response, fix_top):
    n = min(len(conc), len(response))
    result = outcome(fit_dose_response, conc[:n], response[:n], intervals="wald",
                     fix_top=100.0 if fix_top else None)
    if not isinstance(result, InhibkinError):
        assert result.ic50 > 0 or np.isnan(result.ic50)
        assert isinstance(result.reported_ic50, str)


@SOME
@given(st.lists(hostile_cell, max_size=10), st.lists(hostile_cell, max_size=10),
       hostile_cell)
def test_morrison_on_hostile_arrays(conc, v, enzyme):
    n = min(len(conc), len(v))
    result = outcome(fit_morrison, conc[:n], v[:n], enzyme=enzyme, intervals="wald")
    if not isinstance(result, InhibkinError):
        assert result.ki_app > 0


@MANY
@given(st.one_of(hostile_cell, st.lists(hostile_cell, max_size=4)), hostile_cell,
       hostile_cell,
       st.sampled_from(["competitive", "uncompetitive", "noncompetitive", "mixed", "bogus",
                        None, 3]),
       st.one_of(st.none(), hostile_cell))
def test_cheng_prusoff_on_hostile_values(ic50, s, km, mechanism, alpha):
    result = outcome(cheng_prusoff, ic50, s, km, mechanism=mechanism, alpha=alpha)
    if isinstance(result, InhibkinError):
        return
    values = np.atleast_1d(np.asarray(result, dtype=float))
    assert np.all(np.isnan(values) | (values >= 0))


@MANY
@given(good_number, good_number, good_number)
def test_cheng_prusoff_competitive_relation(ic50, s, km):
    """Ki = IC50 / (1 + S/Km) for a competitive inhibitor (Cheng & Prusoff 1973, Biochem.
    Pharmacol. 22:3099), over the whole 1e-15 … 1e3 M range."""
    assert cheng_prusoff(ic50, s, km) == pytest.approx(ic50 / (1 + s / km), rel=1e-12)


# ---------------------------------------------------------------- grids


@FEW
@given(hostile_table(["substrate", "inhibitor", "rate"]),
       st.sampled_from(["uniform", "relative"]))
def test_mechanism_fit_on_hostile_tables(table, weighting):
    result = outcome(fit_mechanisms, table, weighting=weighting, intervals="wald")
    if isinstance(result, InhibkinError):
        return
    assert result.verdict in VERDICTS
    assert len(result.data) == len(table)
    result.summary()
    result._repr_html_()


BAD_CELLS = [np.nan, np.inf, -np.inf, -2.5, "n/a", None, "1,5"]


@SOME
@given(st.integers(0, 10_000), st.sampled_from(["substrate", "inhibitor", "rate"]),
       st.integers(0, 23), st.sampled_from(BAD_CELLS))
def test_one_bad_cell_is_named_by_column_and_row(seed, name, row, bad):
    """One bad cell in a valid grid: a DataError whose problems name that column and
    row label (the label, not the position: the index is shuffled)."""
    # A negative rate is data (noise around zero), not a bad cell.
    assume(not (name == "rate" and bad == -2.5))
    table = _valid_grid(seed % 50)
    table.index = np.random.default_rng(seed).permutation(np.arange(100, 100 + len(table)))
    table[name] = table[name].astype(object)
    label = table.index[row]
    table.loc[label, name] = bad
    error = outcome(fit_mechanisms, table, intervals="wald")
    assert isinstance(error, DataError)
    assert any(p.column == name and p.row == label for p in error.problems)
    assert f"row {label}" in str(error) and repr(name) in str(error)


@pytest.mark.parametrize("missing", ["substrate", "inhibitor", "rate"])
def test_a_missing_column_is_named(missing):
    with pytest.raises(DataError, match=f"column '{missing}': column is missing"):
        fit_mechanisms(_valid_grid(1).drop(columns=missing))


@pytest.mark.parametrize("rows", [0, 1])
def test_empty_and_single_row_tables(rows):
    with pytest.raises(DataError, match="no rows|points"):
        fit_mechanisms(_valid_grid(1).iloc[:rows])


# ---------------------------------------------------------------- campaigns


@st.composite
def hostile_campaign(draw):
    table = draw(hostile_table(["substrate_uM", "inhibitor_nM", "rate"], max_rows=30))
    table["compound"] = draw(column(hostile_id, len(table)))
    table["hostile"] = True
    if draw(st.booleans()):
        # Valid compounds beside the hostile rows, to check they are not taken down.
        good, _ = simulate_campaign(2, seed=draw(st.integers(0, 100)))
        table = pd.concat([table, good.assign(hostile=False)], ignore_index=True)
    return table


@SOME
@given(hostile_campaign())
def test_campaign_on_hostile_tables_keeps_every_compound_once(table):
    result = outcome(fit_campaign, table, quiet=True)
    if isinstance(result, InhibkinError):
        return
    ranking = result.ranking
    compounds = pd.unique(table["compound"])
    assert len(ranking) == len(compounds)
    assert not ranking["compound"].duplicated().any()
    assert set(ranking["status"]) <= set(STATUSES)
    failed = ranking[ranking["status"] == "failed"]
    assert (failed["reason"].str.len() > 0).all()
    # A Ki is a number only when it is determined.
    assert ranking.loc[ranking["status"] != "determined", ["ki_M", "pki"]].isna().all().all()
    # The valid compounds beside the hostile rows are fitted (unless a hostile row
    # happens to carry the same name).
    hostile_names = set(table.loc[table["hostile"].astype(bool), "compound"])
    for name in set(table.loc[~table["hostile"].astype(bool), "compound"]) - hostile_names:
        assert ranking.set_index("compound").loc[name, "status"] != "failed"
    html_text = result._repr_html_()
    assert "<script>" not in html_text
    result.summary()
    result.parameters()


@st.composite
def hostile_plates(draw):
    n = draw(st.integers(0, 30))
    table = pd.DataFrame({
        "compound": draw(column(st.one_of(hostile_id, st.sampled_from(["A", "B"])), n)),
        "plate": draw(column(st.sampled_from(["P1", "P2", None, 3]), n)),
        "role": draw(column(st.sampled_from(["sample", "sample", "max", "min", "blank",
                                             None]), n)),
        "inhibitor_nM": draw(column(st.one_of(hostile_cell, good_number), n)),
        "signal": draw(column(st.one_of(hostile_cell, good_number), n)),
        "substrate_uM": draw(column(st.one_of(hostile_cell, st.just(10.0)), n)),
    })
    if draw(st.integers(0, 5)) == 0:
        table = table.drop(columns=draw(st.sampled_from(list(table.columns))))
    return table


@SOME
@given(hostile_plates(), st.one_of(st.just(2e-5), hostile_cell))
def test_potency_paths_on_hostile_plates(plates, km):
    result = outcome(fit_campaign, dose_response=plates, km=km, quiet=True,
                     intervals="wald")
    if not isinstance(result, InhibkinError):
        samples = plates[plates["role"] == "sample"]
        assert len(result.ranking) == samples["compound"].nunique(dropna=False)
        assert set(result.ranking["status"]) <= set(STATUSES)
    plain = plates.rename(columns={"inhibitor_nM": "inhibitor", "substrate_uM": "substrate"})
    outcome(potency_table, plain, km=km, intervals="wald")
    outcome(plate_qc, plain)


@st.composite
def hostile_reads(draw):
    wells = draw(st.lists(st.sampled_from(["A1", "A2", "B1", None, 7]), min_size=0,
                          max_size=3, unique=True))
    times = np.arange(0.0, 120.0, 10.0)
    rows = []
    for well in wells:
        slope = draw(st.floats(0.0, 1e-2))
        for t in times:
            rows.append({"plate": 1, "well": well, "time": t, "signal": 0.1 + slope * t})
    reads = pd.DataFrame(rows, columns=["plate", "well", "time", "signal"])
    if len(reads):
        k = draw(st.integers(0, len(reads) - 1))
        reads = reads.astype({"time": object, "signal": object})
        reads.loc[k, draw(st.sampled_from(["time", "signal"]))] = draw(hostile_cell)
    plate_map = pd.DataFrame({
        "plate": 1, "well": wells,
        "compound": draw(column(hostile_id, len(wells))),
        "substrate": draw(column(st.one_of(hostile_cell, good_number), len(wells))),
        "inhibitor": draw(column(st.one_of(hostile_cell, good_number), len(wells))),
    })
    return reads, plate_map


@SOME
@given(hostile_reads(), st.sampled_from(["linear", "curve", "integrated"]))
def test_initial_rates_on_hostile_reads(data, method):
    reads, plate_map = data
    # The integrated method's second pass needs the substrate as signal.
    units = {"signal_unit": "uM"} if method == "integrated" else {}
    result = outcome(initial_rates, reads, plate_map, method=method, substrate_unit="uM",
                     inhibitor_unit="nM", **units)
    if not isinstance(result, InhibkinError):
        assert len(result.table) <= len(plate_map)
        result.summary()


# ---------------------------------------------------------------- files and the CLI


@SOME
@given(st.binary(max_size=200))
def test_reading_arbitrary_bytes(tmp_path_factory, content):
    folder = tmp_path_factory.mktemp("bytes")
    for suffix in (".csv", ".parquet"):
        path = folder / f"table{suffix}"
        path.write_bytes(content)
        result = outcome(read_table, path)
        if isinstance(result, InhibkinError):
            assert str(path) in str(result)
        else:
            assert isinstance(result, pd.DataFrame) and len(result) > 0


@settings(max_examples=50, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                 HealthCheck.function_scoped_fixture])
@given(hostile_campaign(), st.sampled_from([".csv", ".parquet"]))
def test_cli_rank_on_hostile_tables(tmp_path_factory, capsys, table, suffix):
    folder = tmp_path_factory.mktemp("cli")
    source = folder / "grid.csv"
    try:
        table.to_csv(source, index=False)
    except UnicodeEncodeError:
        assume(False)  # a lone surrogate cannot be written as UTF-8 at all
    output = folder / f"ranking{suffix}"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        status = main(["rank", "--grid", str(source), "-o", str(output), "--quiet"])
    assert not [w for w in caught if not issubclass(w.category, InhibkinWarning)]
    err = capsys.readouterr().err
    assert status in (0, 1, 2)
    if status == 2:
        assert not output.exists() and err.startswith("inhibkin rank: ")
    else:
        ranking = read_table(output)
        assert len(ranking) == read_table(source)["compound"].nunique(dropna=False)
    # Nothing but the input, the output and nothing else in the folder.
    assert {p.name for p in folder.iterdir()} <= {source.name, output.name}


# ---------------------------------------------------------------- numerical edge cases


def test_all_rates_equal_is_refused_with_the_reason():
    table = _valid_grid(1)
    table["rate"] = 3.0
    with pytest.raises(DataError, match=r"column 'rate' \(value 3\.0\): all rates are equal"):
        fit_mechanisms(table)
    with pytest.raises(DataError, match="all rates are equal"):
        fit_michaelis_menten([1, 2, 4, 8], [3.0, 3.0, 3.0, 3.0])


def test_substrate_far_below_km_says_km_and_vmax_not_determined():
    s = np.geomspace(1.0, 100.0, 6)
    data = simulate_grid("competitive", vmax=10.0, km=1e4, kic=5.0, kiu=5.0, s=s,
                         i=np.linspace(0.0, 40.0, 5), cv=0.03, seed=1)
    fit = fit_mechanisms(data, intervals="wald")
    params = fit.best_fit.params
    assert not params.loc["km", "determined"] and not params.loc["vmax", "determined"]
    mm = fit_michaelis_menten(s, 10.0 * s / (1e4 + s))
    assert not mm.params.loc["km", "determined"]
    assert format_estimate(mm.params.loc["km"]) in ("not determined",) or \
        format_estimate(mm.params.loc["km"]).startswith(">")


def test_substrate_far_above_km_flags_km_in_the_campaign():
    s = np.geomspace(1.0, 100.0, 6)
    data = simulate_grid("noncompetitive", vmax=10.0, km=1e-3, kic=5.0, kiu=5.0, s=s,
                         i=np.linspace(0.0, 40.0, 5), cv=0.03, seed=2)
    fit = fit_mechanisms(data, intervals="wald")
    assert not fit.best_fit.params.loc["km", "determined"]
    # vmax stays determined: with S far above km the plateau is what is measured.
    assert fit.best_fit.params.loc["vmax", "determined"]
    table = pd.DataFrame({"compound": "HIGH-S", "substrate_uM": data["substrate"],
                          "inhibitor_nM": data["inhibitor"], "rate": data["rate"]})
    row = fit_campaign(table, quiet=True).ranking.iloc[0]
    assert "km not determined within the tested substrate range" in row["flags"]


def test_inhibitor_without_effect_is_inactive_with_ki_as_a_bound():
    s = np.geomspace(1.0, 100.0, 6)
    i_nM = np.linspace(0.0, 40.0, 5)
    data = simulate_grid("none", vmax=10.0, km=10.0, kic=1.0, kiu=1.0, s=s, i=i_nM,
                         cv=0.03, seed=1)
    fit = fit_mechanisms(data)
    assert fit.verdict == "none"
    for model, constant in (("competitive", "kic"), ("uncompetitive", "kiu"),
                            ("noncompetitive", "ki")):
        row = fit.models[model].params.loc[constant]
        assert not row["determined"]
        assert format_estimate(row).startswith("> ")
        assert row["ci_low"] > i_nM.max()  # no effect up to 40 nM: Ki is above it
    table = pd.DataFrame({"compound": "INERT", "substrate_uM": data["substrate"],
                          "inhibitor_nM": data["inhibitor"], "rate": data["rate"]})
    row = fit_campaign(table, quiet=True, intervals="profile").ranking.iloc[0]
    assert row["status"] == "inactive" and row["verdict"] == "none"
    assert np.isnan(row["ki_M"]) and np.isnan(row["pki"])
    assert row["ki_low_M"] > 40e-9 and row["ki_high_M"] == np.inf
    assert "Ki > " in row["ki_reported"]


def test_constant_at_its_bound_is_not_reported_as_a_number():
    """A competitive inhibitor far weaker than the tested range: kic runs to its upper
    bound; the campaign gives a bound or inactive, never a Ki number."""
    s = np.geomspace(2.0, 200.0, 6)
    data = simulate_grid("competitive", vmax=10.0, km=20.0, kic=1e6, kiu=1e6, s=s,
                         i=np.linspace(0.0, 10.0, 4), cv=0.0, seed=1)
    fit = fit_mechanisms(data, intervals="wald")
    kic = fit.models["competitive"].params.loc["kic"]
    assert not kic["determined"]
    table = pd.DataFrame({"compound": "WEAK", "substrate_uM": data["substrate"],
                          "inhibitor_nM": data["inhibitor"], "rate": data["rate"]})
    row = fit_campaign(table, quiet=True).ranking.iloc[0]
    assert row["status"] in ("bound", "inactive") and np.isnan(row["ki_M"])


def test_near_singular_jacobian_two_substrate_levels():
    """Two substrate levels and two inhibitor levels: vmax, km, kic and kiu of the mixed
    model are barely separable. The fit ends, with a verdict and honest flags."""
    data = simulate_grid("mixed", vmax=10.0, km=20.0, kic=8.0, kiu=30.0, s=[10.0, 10.001],
                         i=[0.0, 20.0], replicates=3, cv=0.02, seed=4)
    fit = outcome(fit_mechanisms, data, intervals="wald")
    if isinstance(fit, InhibkinError):
        return
    assert fit.verdict in VERDICTS
    mixed = fit.models["mixed"].params
    assert not mixed.loc["km", "determined"] or not mixed.loc["vmax", "determined"]


@FEW
@given(st.floats(-15.0, 3.0), st.floats(-15.0, 3.0), st.floats(-12.0, 3.0))
def test_badly_scaled_data_give_rescaled_answers(log_s, log_i, log_v):
    """Least squares is equivariant under rescaling: S × a, I × b, v × c gives km × a,
    kic × b, vmax × c (common practice). Exercised from 1e-15 to 1e3 (rates to 1e-12)."""
    base = simulate_grid("competitive", vmax=10.0, km=20.0, kic=8.0, kiu=8.0,
                         s=np.geomspace(2.0, 200.0, 6), i=np.linspace(0.0, 40.0, 4),
                         cv=0.03, seed=9)
    a, b, c = 10.0 ** log_s / 20.0, 10.0 ** log_i / 8.0, 10.0 ** log_v / 10.0
    scaled = base.assign(substrate=base["substrate"] * a, inhibitor=base["inhibitor"] * b,
                         rate=base["rate"] * c)
    reference = fit_mechanisms(base, intervals="wald", models=("none", "competitive",
                                                                "mixed"))
    fit = outcome(fit_mechanisms, scaled, intervals="wald",
                  models=("none", "competitive", "mixed"))
    assert not isinstance(fit, InhibkinError), fit
    assert fit.verdict == reference.verdict
    want = reference.models["competitive"].best_values
    got = fit.models["competitive"].best_values
    for name, factor in (("vmax", c), ("km", a), ("kic", b)):
        assert got[name] == pytest.approx(want[name] * factor, rel=SCALE_RTOL)


def test_write_table_refuses_unknown_formats_and_missing_directories(tmp_path):
    frame = pd.DataFrame({"a": [1]})
    with pytest.raises(DataError, match="unknown table format"):
        write_table(frame, tmp_path / "out.xlsx")
    with pytest.raises(DataError, match="directory does not exist"):
        write_table(frame, tmp_path / "absent" / "out.csv")
