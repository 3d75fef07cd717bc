"""Statistical validation: how often is the verdict right, do the 95 % intervals cover?

``python -m benchmarks.validation [--out DIR] [--n N] [--n-target N] [--workers W]``
(``make validate``) simulates seeded data sets from every mechanism (none, competitive,
uncompetitive, noncompetitive, mixed with alpha = kiu/kic = 0.2 and 5) at four noise
levels (2 %, 5 %, 10 % CV and a constant SD) on four designs (the standard 8 × 6 grid, a
sparse 4 × 3 grid, a grid whose inhibitor levels lie far below Ki, and one whose
substrate levels all lie far below km), fits each with :func:`inhibkin.fit_mechanisms`
and prints and saves (CSV and PNG, default ``out/validation/``):

* the confusion matrix of verdicts and the outcome classes defined in :func:`outcome`;
* the coverage of the 95 % intervals of km, kic, kiu (ki for noncompetitive), from the
  fit of the true model, with a Clopper–Pearson band on each rate;
* the bias and spread of pKi (−log10 of each inhibition constant).

Every data set has its own seed, derived from (study seed, cell, replicate), so results
do not depend on how the work is split between processes.

The Monte Carlo machinery (:func:`monte_carlo`, :func:`rate_table`) is generic: it takes
a simulate and a fit function, which is how the test suite checks it against an exactly
known answer (the t intervals of ordinary least squares).
"""

from __future__ import annotations

import argparse
import itertools
import multiprocessing
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from inhibkin.core.compare import decide
from inhibkin.core.models import MODELS
from inhibkin.design import CALL_OUTCOMES, call_outcome
from inhibkin.errors import DataError
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.simulate import simulate_grid, standard_design
from inhibkin.validate import check_grid

__all__ = [
    "Case",
    "TRUTHS",
    "NOISES",
    "DESIGNS",
    "OUTCOMES",
    "outcome",
    "monte_carlo",
    "rate_table",
    "study_cases",
    "run_study",
    "fit_case",
    "main",
]

#: Study seed (the default of ``--seed``).
SEED = 20261208
#: Confidence level of the intervals whose coverage is measured.
LEVEL = 0.95
#: Level of the Clopper–Pearson bands printed beside every Monte Carlo rate.
BAND_LEVEL = 0.95
#: Data sets per cell, and in the cells the targets are set on (standard design, 5 % CV).
N_PER_CELL = 500
N_TARGET_CELL = 2000
#: The targets of issue 8, on the standard design at 5 % CV.
TARGET_CORRECT = {"competitive": 0.90, "uncompetitive": 0.90, "noncompetitive": 0.80,
                  "mixed_a0.2": 0.80, "mixed_a5": 0.80}
TARGET_WRONG_MAX = 0.05
TARGET_COVERAGE = (0.92, 0.98)

VMAX = 10.0
KM = 2.0
KI = 0.5

#: Truth name -> (rate law, true constants). Mixed appears twice, alpha = kiu/kic 0.2 and 5.
TRUTHS: dict[str, tuple[str, dict[str, float]]] = {
    "none": ("none", {}),
    "competitive": ("competitive", {"kic": KI}),
    "uncompetitive": ("uncompetitive", {"kiu": KI}),
    "noncompetitive": ("noncompetitive", {"kic": KI}),
    "mixed_a0.2": ("mixed", {"kic": KI, "kiu": 0.2 * KI}),
    "mixed_a5": ("mixed", {"kic": KI, "kiu": 5.0 * KI}),
}

#: Noise name -> (simulate_grid keywords, weighting that matches it).
NOISES: dict[str, tuple[dict[str, float], str]] = {
    "cv2": ({"cv": 0.02}, "relative"),
    "cv5": ({"cv": 0.05}, "relative"),
    "cv10": ({"cv": 0.10}, "relative"),
    # Constant SD of 1 % of vmax: a CV of 1 % at saturation, 5-50 % at the lowest rates.
    "sd": ({"sd": 0.01 * VMAX}, "uniform"),
}


def _design_standard(km, ki):
    return standard_design(km, ki)


def _design_sparse(km, ki):
    return standard_design(km, ki, n_substrate=4, n_inhibitor=3)


def _design_low_inhibitor(km, ki):
    # Substrate well placed, inhibitor at most 0.2 × Ki: at most ~17 % inhibition.
    s, _ = standard_design(km, ki)
    return s, ki * np.linspace(0.0, 0.2, 6)


def _design_low_substrate(km, ki):
    # Every S at or below km/10: v ≈ vmax·S/km·f(I), so competitive and noncompetitive
    # look alike and an uncompetitive constant is nearly invisible.
    _, i = standard_design(km, ki)
    return km * np.geomspace(0.01, 0.1, 8), i


#: Design name -> function (km, ki scale) -> (substrate levels, inhibitor levels).
DESIGNS: dict[str, Callable[[float, float], tuple[np.ndarray, np.ndarray]]] = {
    "standard": _design_standard,
    "sparse_4x3": _design_sparse,
    "low_inhibitor": _design_low_inhibitor,
    "low_substrate": _design_low_substrate,
}

#: Outcome classes, in display order: those of :func:`inhibkin.design.call_outcome`,
#: and ``rejected`` for a data set the input checks refuse (:func:`fit_case`).
OUTCOMES = (*CALL_OUTCOMES, "rejected")


def outcome(truth_model: str, verdict: str) -> str:
    """Class of a verdict given the true rate law.

    ``correct``
        The verdict is the true mechanism.
    ``ambiguous``
        The verdict declines to choose (right answer when the design cannot tell).
    ``larger``
        A model that nests the truth: ``mixed`` for a one-constant truth, or any
        inhibition model for a non-inhibitor. Expected at about the F-tests' level
        (alpha = 0.05); reported apart, as the nesting makes it the test's type-I rate.
    ``missed``
        ``none`` for an inhibitor: "no inhibition detected", a statement of low power,
        not a named mechanism.
    ``wrong`` (*confidently wrong*)
        Any other definite verdict: a mechanism that is neither the truth nor nests it
        (a different one-constant mechanism, or a one-constant mechanism for a mixed
        truth).
    ``failed``
        The fit failed.
    ``rejected``
        The input checks refused the data set (rates with no signal at all; negative
        readings alone are data and are fitted).
    """
    if verdict == "rejected":
        return "rejected"
    return call_outcome(truth_model, verdict)


@dataclass(frozen=True)
class Case:
    """One cell of the study: a truth, a noise model and a design."""

    truth: str
    noise: str
    design: str
    n: int

    @property
    def key(self) -> tuple[str, str, str]:
        return (self.truth, self.noise, self.design)

    @property
    def model(self) -> str:
        return TRUTHS[self.truth][0]

    @property
    def constants(self) -> dict[str, float]:
        return TRUTHS[self.truth][1]

    def levels(self):
        """Substrate and inhibitor levels; the inhibitor scale is the truth's first
        constant (kic, else kiu; KI for a non-inhibitor)."""
        c = self.constants
        scale = c.get("kic", c.get("kiu", KI))
        return DESIGNS[self.design](KM, scale)

    def true_params(self) -> dict[str, float]:
        """True value of every parameter of the true model (ki for noncompetitive)."""
        out = {"vmax": VMAX, "km": KM, **self.constants}
        if self.model == "noncompetitive":
            out["ki"] = out.pop("kic")
        return out


def study_cases(n=N_PER_CELL, n_target=N_TARGET_CELL, *, truths=None, noises=None,
                designs=None) -> list[Case]:
    """Every (truth, noise, design) cell, with n data sets (n_target on standard/cv5)."""
    out = []
    for truth, noise, design in itertools.product(truths or TRUTHS, noises or NOISES,
                                                  designs or DESIGNS):
        size = n_target if (noise, design) == ("cv5", "standard") else n
        out.append(Case(truth, noise, design, size))
    return out


def _seed(base: int, cell: int, replicate: int) -> np.random.Generator:
    return np.random.default_rng([base, cell, replicate])


def simulate_case(case: Case, rng: np.random.Generator) -> pd.DataFrame:
    """One simulated data set of ``case`` (duplicates on every grid cell)."""
    s, i = case.levels()
    noise_kw, _ = NOISES[case.noise]
    return simulate_grid(case.model, vmax=VMAX, km=KM, s=s, i=i, seed=rng, **noise_kw,
                         **case.constants)


def _rejected(reason: str) -> dict:
    """The record of a data set the input checks refuse (e.g. rates with no signal)."""
    return {"verdict": "rejected", "outcome": "rejected", "candidates": "",
            "reason": f"refused by the input checks: {reason}",
            "true_model_converged": False}


def edge_verdict(fit, sides: int) -> str:
    """The verdict under rule 4's edge test with ``edge_sides=sides`` on the same fits:
    ``fit.verdict`` where rules 1–4 agree under the fit's own test and this one, else
    the verdict of rules 1–4 under this one (rule 5 and the wells' flags, which follow
    rule 4, are not rerun for those data sets)."""
    own = decide(fit.comparison, fit.ftests, fit.options)
    other = decide(fit.comparison, fit.ftests, replace(fit.options, edge_sides=sides))
    return fit.verdict if own.verdict == other.verdict else other.verdict


def record_of(case: Case, fit) -> dict:
    """One record from a :class:`~inhibkin.mechanism.fit.MechanismFit` of a ``case`` data set.

    The record holds the verdict and its outcome class and, for each parameter of the
    true model, the estimate, its interval from the fit of the true model, whether the
    interval covers the truth and whether the constant was determined.
    """
    one_sided = edge_verdict(fit, 1)
    record = {"verdict": fit.verdict, "outcome": outcome(case.model, fit.verdict),
              "candidates": "+".join(fit.candidates), "reason": fit.reason,
              "verdict_one_sided": one_sided,
              "outcome_one_sided": outcome(case.model, one_sided)}
    true_fit = fit.models.get(case.model)
    record["true_model_converged"] = bool(true_fit is not None and true_fit.converged)
    if not record["true_model_converged"]:
        return record
    for name, value in case.true_params().items():
        if name == "vmax":
            continue
        row = true_fit.params.loc[name]
        record[f"{name}_est"] = row["estimate"]
        record[f"{name}_low"] = row["ci_low"]
        record[f"{name}_high"] = row["ci_high"]
        record[f"{name}_covered"] = bool(row["ci_low"] <= value <= row["ci_high"])
        record[f"{name}_determined"] = bool(row["determined"])
    return record


def fit_case(case: Case, rng: np.random.Generator, *, intervals="wald") -> dict:
    """Simulate one data set of ``case``, fit it with the lmfit path
    (:func:`inhibkin.fit_mechanisms`) and return its record (:func:`record_of`)."""
    data = simulate_case(case, rng)
    try:
        fit = fit_mechanisms(data, weighting=NOISES[case.noise][1], intervals=intervals,
                             level=LEVEL)
    except DataError as err:
        return _rejected(str(err))
    return record_of(case, fit)


def fit_cases_engine(case: Case, rngs: Sequence[np.random.Generator]) -> list[dict]:
    """:func:`fit_case` for many data sets of one case at once, with the batched engine
    (:func:`inhibkin.engine.mechanisms.fit_mechanisms_batch`, log-Wald intervals)."""
    from inhibkin.engine.mechanisms import fit_mechanisms_batch

    records: list[dict | None] = []
    usable = []
    for rng in rngs:
        data = simulate_case(case, rng)
        try:
            check_grid(data, substrate="substrate", inhibitor="inhibitor", rate="rate")
        except DataError as err:
            records.append(_rejected(str(err)))
            continue
        records.append(None)
        usable.append(data)
    fits = iter(fit_mechanisms_batch(usable, weighting=NOISES[case.noise][1], level=LEVEL))
    return [r if r is not None else record_of(case, next(fits)) for r in records]


def _run_chunk(task):
    fit_one, batched, case, cell, base, start, stop = task
    replicates = range(start, stop)
    if batched:
        records = fit_one(case, [_seed(base, cell, j) for j in replicates])
    else:
        records = [fit_one(case, _seed(base, cell, j)) for j in replicates]
    return [{"cell": cell, "replicate": j, **r} for j, r in zip(replicates, records)]


def monte_carlo(cases: Sequence, fit_one: Callable, *, seed=SEED, workers=1, chunk=25,
                batched=False) -> pd.DataFrame:
    """Run ``fit_one(case, rng)`` for every replicate of every case.

    Parameters
    ----------
    cases : sequence
        Objects with an ``n`` attribute (replicates) and a ``key`` tuple naming the cell.
    fit_one : callable
        ``fit_one(case, rng) -> dict``: simulate one data set with ``rng`` and fit it.
        Must be picklable (a module-level function) when ``workers > 1``.
    seed : int
        Study seed; replicate j of cell c uses ``default_rng([seed, c, j])``, whatever
        the number of workers.
    workers : int
        Processes; 1 runs in this process.
    chunk : int
        Replicates per task sent to a worker.
    batched : bool
        ``fit_one(case, rngs) -> list of dict`` takes a chunk of replicates at once
        (the batched engine); the seeds are the same.

    Returns
    -------
    pandas.DataFrame
        One row per replicate: the case's key fields, ``cell``, ``replicate`` and the
        record's entries.
    """
    tasks = [(fit_one, batched, case, c, seed, start, min(start + chunk, case.n))
             for c, case in enumerate(cases) for start in range(0, case.n, chunk)]
    if workers > 1:
        with multiprocessing.get_context("fork").Pool(workers) as pool:
            chunks = pool.map(_run_chunk, tasks, chunksize=1)
    else:
        chunks = [_run_chunk(t) for t in tasks]
    rows = [r for part in chunks for r in part]
    frame = pd.DataFrame(rows)
    key_names = getattr(cases[0], "key_names", ("truth", "noise", "design"))
    keys = pd.DataFrame([case.key for case in cases], columns=list(key_names))
    keys["cell"] = range(len(cases))
    return keys.merge(frame, on="cell").sort_values(["cell", "replicate"],
                                                    ignore_index=True)


def clopper_pearson(k, n, level=BAND_LEVEL):
    """Exact binomial interval for k successes in n trials (Clopper & Pearson 1934)."""
    k = np.asarray(k, dtype=float)
    n = np.asarray(n, dtype=float)
    a = (1 - level) / 2
    with np.errstate(invalid="ignore", divide="ignore"):
        low = np.where(k > 0, stats.beta.ppf(a, k, n - k + 1), 0.0)
        high = np.where(k < n, stats.beta.ppf(1 - a, k + 1, n - k), 1.0)
    return low, high


def rate_table(records: pd.DataFrame, flag: str, by: Sequence[str]) -> pd.DataFrame:
    """Rate of a boolean column per group, with counts and a Clopper–Pearson band.

    Rows where ``flag`` is missing (NaN) are left out of that group's count.
    """
    present = records.dropna(subset=[flag])
    grouped = present.groupby(list(by), sort=False)[flag]
    out = pd.DataFrame({"k": grouped.sum().astype(int), "n": grouped.size()})
    out["rate"] = out["k"] / out["n"]
    out["band_low"], out["band_high"] = clopper_pearson(out["k"], out["n"])
    return out


def confusion_matrix(records: pd.DataFrame) -> pd.DataFrame:
    """Share of each verdict per (noise, design, truth)."""
    verdicts = list(MODELS) + ["ambiguous", "failed", "rejected"]
    table = pd.crosstab([records["noise"], records["design"], records["truth"]],
                        records["verdict"], normalize="index")
    return table.reindex(columns=verdicts, fill_value=0.0)


def outcome_table(records: pd.DataFrame) -> pd.DataFrame:
    """Share of each outcome class per (noise, design, truth), with n."""
    table = pd.crosstab([records["noise"], records["design"], records["truth"]],
                        records["outcome"], normalize="index")
    table = table.reindex(columns=list(OUTCOMES), fill_value=0.0)
    table["n"] = records.groupby(["noise", "design", "truth"]).size()
    return table


def edge_rule_table(records: pd.DataFrame) -> pd.DataFrame:
    """Correct and confidently wrong per (noise, design, truth) under rule 4's two-sided
    edge test (the default) and the one-sided one (``edge_sides=1``), on the same fits."""
    keyed = records.dropna(subset=["outcome_one_sided"])
    by = [keyed["noise"], keyed["design"], keyed["truth"]]
    out = pd.DataFrame({
        "correct": keyed["outcome"].eq("correct").groupby(by).mean(),
        "correct, one-sided": keyed["outcome_one_sided"].eq("correct").groupby(by).mean(),
        "wrong": keyed["outcome"].eq("wrong").groupby(by).mean(),
        "wrong, one-sided": keyed["outcome_one_sided"].eq("wrong").groupby(by).mean(),
    })
    out["n"] = keyed.groupby(["noise", "design", "truth"]).size()
    return out


def coverage_table(records: pd.DataFrame) -> pd.DataFrame:
    """Coverage of the 95 % intervals of km, kic, kiu and ki, fits of the true model."""
    parts = []
    for name in ("km", "kic", "kiu", "ki"):
        flag = f"{name}_covered"
        if flag not in records:
            continue
        sub = records[records["true_model_converged"] & records[flag].notna()]
        if sub.empty:
            continue
        table = rate_table(sub.assign(**{flag: sub[flag].astype(bool)}), flag,
                           ["noise", "design", "truth"])
        table["determined"] = sub.groupby(["noise", "design", "truth"])[
            f"{name}_determined"].mean()
        parts.append(table.assign(parameter=name).set_index("parameter", append=True))
    return pd.concat(parts).sort_index()


def pki_table(records: pd.DataFrame) -> pd.DataFrame:
    """Bias, spread and RMSE of pKi = −log10(K) for each inhibition constant.

    Bias is mean(pKi_est − pKi_true) in log10 units; unit-free, since a change of unit
    shifts both by the same amount. Fits of the true model only.
    """
    parts = []
    for name in ("kic", "kiu", "ki"):
        if f"{name}_est" not in records:
            continue
        sub = records[records["true_model_converged"] & records[f"{name}_est"].notna()]
        for key, group in sub.groupby(["noise", "design", "truth"], sort=False):
            truth = TRUTHS[key[2]][1]
            true_value = truth.get(name, truth.get("kic"))
            error = -np.log10(group[f"{name}_est"].to_numpy() / true_value)
            parts.append({"noise": key[0], "design": key[1], "truth": key[2],
                          "parameter": name, "n": error.size, "bias": error.mean(),
                          "sd": error.std(ddof=1), "rmse": np.sqrt(np.mean(error**2))})
    return pd.DataFrame(parts).set_index(["noise", "design", "truth", "parameter"])


def _fit_wald(case, rng):
    return fit_case(case, rng, intervals="wald")


def _fit_profile(case, rng):
    return fit_case(case, rng, intervals="profile")


#: Fitting paths of the study: (fit function, batched, replicates per task).
FITTERS = {
    "engine": (fit_cases_engine, True, 100),
    "lmfit": (_fit_wald, False, 25),
    "lmfit-profile": (_fit_profile, False, 10),
}


def run_study(cases, *, seed=SEED, workers=2, fitter="engine") -> dict[str, pd.DataFrame]:
    """The records and every summary table of the study.

    ``fitter`` is a key of :data:`FITTERS`: the batched engine (log-Wald intervals, the
    default), the lmfit path with log-Wald intervals, or with profile intervals.
    """
    fit_one, batched, chunk = FITTERS[fitter]
    records = monte_carlo(cases, fit_one, seed=seed, workers=workers, chunk=chunk,
                          batched=batched)
    return {
        "records": records,
        "confusion": confusion_matrix(records),
        "outcomes": outcome_table(records),
        "edge_rule": edge_rule_table(records),
        "coverage": coverage_table(records),
        "pki": pki_table(records),
    }


def target_report(tables) -> str:
    """The issue's targets against the measured rates (standard design, 5 % CV)."""
    lines = ["Targets (standard 8 x 6 design, 5 % CV, relative weighting):"]
    out = tables["outcomes"]
    for truth, goal in TARGET_CORRECT.items():
        key = ("cv5", "standard", truth)
        if key not in out.index:
            continue
        rate = out.loc[key, "correct"]
        lines.append(f"  correct calls {truth:<15} {rate:6.1%}  target >= {goal:.0%}  "
                     f"{'met' if rate >= goal else 'MISSED'}")
    worst = out["wrong"].idxmax()
    lines.append(f"  confidently wrong, worst cell {'/'.join(worst)}: "
                 f"{out['wrong'].max():.1%}  target <= {TARGET_WRONG_MAX:.0%}  "
                 f"{'met' if out['wrong'].max() <= TARGET_WRONG_MAX else 'MISSED'}")
    over = out[out["wrong"] > TARGET_WRONG_MAX]
    for key, row in over.iterrows():
        lines.append(f"    over target: {'/'.join(key)} wrong = {row['wrong']:.1%}")
    cov = tables["coverage"]
    std = cov.xs(("cv5", "standard"), level=("noise", "design"))
    low, high = TARGET_COVERAGE
    bad = std[(std["rate"] < low) | (std["rate"] > high)]
    lines.append(f"  coverage on standard/cv5: {std['rate'].min():.1%} to "
                 f"{std['rate'].max():.1%}  target {low:.0%}-{high:.0%}  "
                 f"{'met' if bad.empty else 'MISSED'}")
    for key, row in bad.iterrows():
        lines.append(f"    outside: {'/'.join(key)} coverage = {row['rate']:.1%} "
                     f"(n = {row['n']})")
    return "\n".join(lines)


def _pct(frame):
    return frame.to_string(float_format=lambda x: f"{100 * x:5.1f}")


def render(tables, intervals="log-scale Wald") -> str:
    """The printed report."""
    out = tables["outcomes"]
    cov = tables["coverage"]
    coverage_wide = cov["rate"].unstack("parameter")
    pki = tables["pki"][["bias", "sd", "rmse"]].unstack("parameter")
    return "\n\n".join([
        "Outcome classes, % of data sets (correct / ambiguous / wrong = confidently wrong /"
        "\nlarger = a model nesting the truth / missed = 'none' for an inhibitor / failed /"
        "\nrejected = refused by the input checks, e.g. rates with no signal)",
        _pct(out.drop(columns="n")),
        "Rule 4's edge test, two-sided (default) against one-sided on the same fits, %",
        _pct(tables["edge_rule"].drop(columns="n")),
        "Verdicts, % of data sets (confusion matrix)",
        _pct(tables["confusion"]),
        f"Coverage of 95 % intervals ({intervals}, fit of the true model), %",
        _pct(coverage_wide),
        "pKi error (estimate - truth, log10 units): bias, SD, RMSE",
        pki.to_string(float_format=lambda x: f"{x:6.3f}"),
        target_report(tables),
    ])


_OUTCOME_COLOURS = {"correct": "tab:green", "ambiguous": "0.7", "wrong": "tab:red",
                    "larger": "tab:orange", "missed": "tab:purple", "failed": "tab:brown",
                    "rejected": "k"}


def plot(tables, path: Path) -> None:
    """Two panels: outcome classes per truth and design at 5 % CV, and coverage."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out = tables["outcomes"].xs("cv5", level="noise")[list(OUTCOMES)]
    cov = tables["coverage"].xs("cv5", level="noise").reset_index()
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(14, 6), constrained_layout=True)
    labels = [f"{d} | {t}" for d, t in out.index]
    left = np.zeros(len(out))
    for name in OUTCOMES:
        ax1.barh(labels, out[name], left=left, color=_OUTCOME_COLOURS[name], label=name)
        left += out[name].to_numpy()
    ax1.invert_yaxis()
    ax1.set_xlabel("share of data sets (5 % CV)")
    ax1.legend(loc="upper center", bbox_to_anchor=(0.5, -0.08), ncol=len(OUTCOMES),
               fontsize=8)
    ax1.set_title("Verdict outcomes by design and true mechanism")
    cov["label"] = cov["design"] + " | " + cov["truth"] + " | " + cov["parameter"]
    y = np.arange(len(cov))
    err = np.vstack([cov["rate"] - cov["band_low"], cov["band_high"] - cov["rate"]])
    ax2.errorbar(cov["rate"], y, xerr=err, fmt="o", ms=3)
    ax2.axvspan(*TARGET_COVERAGE, color="0.9")
    ax2.axvline(LEVEL, color="k", lw=0.8)
    ax2.set_yticks(y, cov["label"], fontsize=6)
    ax2.invert_yaxis()
    ax2.set_xlabel("coverage of 95 % intervals (5 % CV); band: target 92-98 %")
    ax2.set_title("Interval coverage")
    fig.savefig(path, dpi=120)
    plt.close(fig)


def save(tables, out_dir: Path) -> list[Path]:
    """Write every table as CSV and the figure as PNG; return the paths."""
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = []
    for name, table in tables.items():
        path = out_dir / f"{name}.csv"
        table.to_csv(path, index=name != "records")
        paths.append(path)
    figure = out_dir / "validation.png"
    plot(tables, figure)
    paths.append(figure)
    return paths


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.validation",
                                     description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", type=Path, default=Path("out/validation"))
    parser.add_argument("--n", type=int, default=N_PER_CELL, help="data sets per cell")
    parser.add_argument("--n-target", type=int, default=N_TARGET_CELL,
                        help="data sets per cell on the standard design at 5 %% CV")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("--fitter", choices=list(FITTERS), default="engine",
                        help="batched engine (default) or the lmfit path")
    parser.add_argument("--designs", nargs="*", choices=list(DESIGNS), default=None)
    parser.add_argument("--noises", nargs="*", choices=list(NOISES), default=None)
    args = parser.parse_args(argv)
    cases = study_cases(args.n, args.n_target, designs=args.designs, noises=args.noises)
    start = time.perf_counter()
    tables = run_study(cases, seed=args.seed, workers=args.workers, fitter=args.fitter)
    elapsed = time.perf_counter() - start
    n_fits = sum(c.n for c in cases)
    print(render(tables, "profile" if args.fitter == "lmfit-profile" else "log-scale Wald"))
    paths = save(tables, args.out)
    print(f"\n{n_fits} data sets in {len(cases)} cells, fitter {args.fitter}, "
          f"{elapsed:.0f} s on {args.workers} "
          f"worker(s) ({1000 * elapsed * args.workers / n_fits:.0f} ms per data set per "
          f"worker); saved {', '.join(str(p) for p in paths)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
