"""Rule 5 (lack of fit, extended families) over many seeds, before and after, from plate reads.

Every plate comes from the mass-action ODE of ``tests/grid_ode.py`` (E, S, I, ES, EI,
ESI, P, and SES, EP when asked; solve_ivp LSODA, rtol 1e-10; independent of inhibkin's
rate laws), read as absorbance with 3 % read noise and 3 % pipetting scatter on an 8 x 6
grid in duplicate, turned into initial rates by ``initial_rates`` (default linear
windows) and fitted by the batched engine (default weighting: rate_se + variance model)
with rule 5 off (``lack_of_fit_alpha=0``) and the rates stage's flags dropped (before),
and with both (the default 0.01 and the flags as ``initial_rates`` sets them, after). For
tight binding the "after" run is made three times: without [E], with [E] given
(``enzyme=``, held) and with [E] given and fitted from it (``fit_enzyme=True``); for
product inhibition three times more: from initial slopes
(``initial_rates(method="curve")``) and from integrated rates (``method="integrated"``),
the rates stage's remedies, from the first 300 s of the reads only (half the
product formed in the window: the assay's remedy), and by the whole-curve fit with the
product's constant given (``fit_progress_curves(product_ki=Kp)``, log-Wald intervals;
rules 1-4, as that fit has no rule 5), the remedy when Kp is known.

Classes, per plate (the issue's definitions): *correct*: the verdict names the true law
and its inhibition constant (the one a ranking reads) is within 2x of the truth with an
interval that contains it; *ambiguous*, *inadequate*: the verdict declines; *flagged*: any
other definite verdict that carries a warning on its rates (``MechanismFit.warnings``:
the product_inhibition flag of :mod:`inhibkin.rates.product_inhibition`); *confidently
wrong*: any other definite verdict (a wrong name, or the constant more than 2x off or
outside its interval, and no warning); *other*: no inhibition detected or a failed fit.
Apart, the share
of definite verdicts whose km interval misses the truth (a bias of the rates, not of
the verdict: linear windows over a few % conversion read low rates at low S).

Run: ``python -m benchmarks.lack_of_fit_study [n_seeds]``; writes docs/lack_of_fit.md.
``python -m benchmarks.lack_of_fit_study 40 tight`` runs only the regimes whose label
holds one of the texts after the count and prints their table (docs untouched).
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

import inhibkin as ik
from inhibkin.core.models import MODELS
from inhibkin.engine import fit_mechanisms_batch

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from grid_ode import EPSILON_PATH, INHIBITOR, READ_CV, Mechanism, plate  # noqa: E402

#: Km = 10 µM and vmax = 0.002 µM/s throughout (grid_ode defaults); for tight binding
#: kcat is lowered so that vmax stays the same with [E] = 50 nM (k_1 keeps Km at 10 µM).
KCAT_TIGHT = 0.04
#: The partial law is the rapid-equilibrium one (v = v_c·(1 + beta·I/kiu)); with kcat =
#: 100/s, ESI turns over (30/s) about as fast as it dissociates (100/s), so the steady-
#: state rates follow it only approximately: noise-free ODE rates of the standard grid
#: fitted by noncompetitive_partial give ki 1.07, beta 0.20 and 1.5 % relative residuals
#: (measured). With kcat = 1/s (and [E] = 2 nM, vmax the same) binding is at equilibrium
#: with turnover and the law's constants are the chemistry's.
KCAT_EQUILIBRIUM = 1.0
#: Inhibitor levels of the tight-binding regimes (µM): 0-400 nM, from half of [E] up.
TIGHT_INHIBITOR = (0.0, 0.025, 0.05, 0.1, 0.2, 0.4)
#: The run that fits whole progress curves with the product's constant given.
WHOLE_CURVES = "after, whole curves, Kp given"
CLASSES = ("correct", "ambiguous", "inadequate", "flagged", "confidently wrong", "other")
SEED = 14


@dataclass(frozen=True)
class Regime:
    """One truth: the chemistry, the verdict that names it, its constants (µM)."""

    mechanism: Mechanism
    verdict: str
    constants: dict
    inhibitor: tuple = INHIBITOR
    runs: tuple = ("before", "after")
    classical: bool = field(default=False)
    read_cv: float = READ_CV


REGIMES = {
    "competitive": Regime(Mechanism(kic=1.0), "competitive", {"ki": 1.0}, classical=True),
    "uncompetitive": Regime(Mechanism(kiu=2.0), "uncompetitive", {"ki": 2.0}, classical=True),
    "noncompetitive": Regime(Mechanism(kic=1.5, kiu=1.5), "noncompetitive", {"ki": 1.5},
                             classical=True),
    "mixed": Regime(Mechanism(kic=1.0, kiu=5.0), "mixed", {"ki": 1.0}, classical=True),
    # As potent as the tight-binding regime and on its inhibitor levels, but with [E]
    # (20 pM) far below Ki: a classical truth whose constant is below the lowest level.
    "competitive, Ki = 5 nM = lowest level / 5, [E] = Ki / 250": Regime(
        Mechanism(kic=0.005), "competitive", {"ki": 0.005},
        inhibitor=TIGHT_INHIBITOR, classical=True),
    "tight binding, [E] = 5 Ki (competitive)": Regime(
        Mechanism(kic=0.01, enzyme=0.05, kcat=KCAT_TIGHT, k_1=1000.0 - KCAT_TIGHT),
        "competitive, tight binding", {"ki": 0.01},
        inhibitor=TIGHT_INHIBITOR,
        runs=("before", "after", "after, [E] given", "after, [E] given and fitted")),
    "substrate inhibition, Ksi = 3 Km (competitive)": Regime(
        Mechanism(kic=1.0, ksi=30.0), "competitive with substrate inhibition", {"ki": 1.0}),
    "partial, beta = 0.3 (noncompetitive)": Regime(
        Mechanism(kic=1.0, kiu=1.0, beta=0.3), "partial noncompetitive", {"ki": 1.0}),
    "partial, beta = 0.3 (noncompetitive), rapid equilibrium": Regime(
        Mechanism(kic=1.0, kiu=1.0, beta=0.3, kcat=KCAT_EQUILIBRIUM,
                  k_1=1000.0 - KCAT_EQUILIBRIUM, enzyme=2e-3),
        "partial noncompetitive", {"ki": 1.0}),
    "product inhibition, Kp = Km/10 (competitive)": Regime(
        Mechanism(kic=1.0, kp=1.0), "competitive", {"ki": 1.0},
        runs=("before", "after", "after, initial slopes", "after, integrated rates",
              "after, reads to 300 s", WHOLE_CURVES)),
    "product inhibition, Kp = Km/10 (competitive), 0.5 % read noise": Regime(
        Mechanism(kic=1.0, kp=1.0), "competitive", {"ki": 1.0}, read_cv=0.005),
}
KM = 10.0


#: The last read time (s) of the "reads to 300 s" run: half the standard 600 s.
SHORT_READS = 300.0
#: Each run's rates route: (``initial_rates`` method, last read time kept, s).
RATES_ROUTE = {"after, initial slopes": ("curve", np.inf),
               "after, integrated rates": ("integrated", np.inf),
               "after, reads to 300 s": ("linear", SHORT_READS)}


def rates(regime: Regime, seed: int, method="linear", last_read=np.inf) -> pd.DataFrame:
    """One plate of ``regime`` read (up to ``last_read`` s) and turned into initial rates."""
    reads, plate_map = plate(regime.mechanism, seed, inhibitor=regime.inhibitor,
                             read_cv=regime.read_cv)
    reads = reads[reads["time"] <= last_read]
    return ik.initial_rates(reads, plate_map, substrate="substrate_uM",
                            inhibitor="inhibitor_uM", method=method,
                            conversion=ik.BeerLambert(EPSILON_PATH * 1e6)).table


def whole_curves(regime: Regime, seed: int):
    """One plate of ``regime`` fitted whole, with the product's constant given (µM)."""
    reads, plate_map = plate(regime.mechanism, seed, inhibitor=regime.inhibitor,
                             read_cv=regime.read_cv)
    return ik.fit_progress_curves(reads, plate_map, substrate="substrate_uM",
                                  inhibitor="inhibitor_uM",
                                  conversion=ik.BeerLambert(EPSILON_PATH * 1e6),
                                  product_ki=regime.mechanism.kp, intervals="wald")


def _holds(params, name, truth) -> bool:
    """Within 2x of ``truth`` with an interval that contains it."""
    row = params.loc[name]
    return bool(0.5 < row["estimate"] / truth < 2.0 and row["ci_low"] <= truth <= row["ci_high"])


def warned(fit) -> bool:
    """Whether the fit carries a warning on its rates (a whole-curve fit has none)."""
    return bool(getattr(fit, "warnings", ()))


def definite(fit) -> bool:
    """A verdict that names a law and reports its constants."""
    return (fit.verdict not in ("ambiguous", "inadequate", "none", "failed", "time_dependent")
            and fit.best_fit is not None)


def classify(fit, regime: Regime) -> str:
    """The class of one verdict (module docstring)."""
    if fit.verdict in ("ambiguous", "inadequate"):
        return fit.verdict
    if not definite(fit):
        return "other"
    params = fit.best_fit.params
    chosen = params.loc[list(MODELS[fit.best].ranking), "estimate"].idxmin()
    right = fit.verdict == regime.verdict and _holds(params, chosen,
                                                     regime.constants["ki"] * 1e-6)
    if right:
        return "correct"
    return "flagged" if warned(fit) else "confidently wrong"


def constant_wrong(fit, regime: Regime) -> bool:
    """The issue's "confidently wrong": a definite verdict whose constant is more than 2x
    off or whose interval excludes the truth, with no warning on its rates (a less
    specific name with the right constants, e.g. "partial mixed" on a partial
    noncompetitive truth, is not counted here but is in the confidently-wrong class)."""
    if not definite(fit) or warned(fit):
        return False
    params = fit.best_fit.params
    chosen = params.loc[list(MODELS[fit.best].ranking), "estimate"].idxmin()
    return not _holds(params, chosen, regime.constants["ki"] * 1e-6)


def run(regime: Regime, run_name: str, seeds) -> pd.Series:
    """Class fractions of one (regime, run) over ``seeds``."""
    if run_name == WHOLE_CURVES:
        fits = [whole_curves(regime, seed) for seed in seeds]
    else:
        method, last_read = RATES_ROUTE.get(run_name, ("linear", np.inf))
        tables = [rates(regime, seed, method, last_read) for seed in seeds]
        options = {"lack_of_fit_alpha": 0.0} if run_name == "before" else {}
        if run_name == "before":
            tables = [table.drop(columns="flags") for table in tables]
        if run_name.startswith("after, [E] given"):
            options["enzyme"] = f"{regime.mechanism.enzyme * 1e3:g}nM"
            # The same information as the held run's; the fit starts from it.
            options["fit_enzyme"] = run_name.endswith("fitted")
        fits = fit_mechanisms_batch(tables, substrate="substrate_uM",
                                    inhibitor="inhibitor_uM", **options)
    classes = pd.Series([classify(f, regime) for f in fits])
    named = np.mean([f.verdict == regime.verdict for f in fits])
    family = next(law.family for law in MODELS.values()
                  if regime.verdict in (law.name, law.label))
    # The family named: a definite verdict of it, or an ambiguous one whose candidates
    # are all of it (e.g. "competitive_si, mixed_si").
    in_family = np.mean([f.verdict not in ("inadequate", "none", "failed")
                         and bool(f.candidates)
                         and all(MODELS[m].family == family for m in f.candidates
                                 if m in MODELS)
                         for f in fits])
    extended = np.mean([f.best is not None and MODELS[f.best].family != "classical"
                        for f in fits])
    flagged = np.mean([warned(f) for f in fits])
    km_missed = [not _holds(f.best_fit.params, "km", KM * 1e-6) for f in fits if definite(f)]
    wrong_constant = np.mean([constant_wrong(f, regime) for f in fits])
    return pd.Series({**{c: float(np.mean(classes == c)) for c in CLASSES},
                      "constant wrong": float(wrong_constant),
                      "right law named": float(named), "right family named": float(in_family),
                      "extended law called": float(extended),
                      "rates flagged": float(flagged),
                      "km interval misses": float(np.mean(km_missed)) if km_missed else np.nan})


def main(n_seeds=20, only=()) -> pd.DataFrame:
    """The table of class fractions per regime and run (``only``: the regimes whose
    label contains one of these texts; every regime when empty)."""
    seeds = [SEED * 1000 + k for k in range(n_seeds)]
    rows = []
    for label, regime in REGIMES.items():
        if only and not any(text in label for text in only):
            continue
        for run_name in regime.runs:
            rows.append({"regime": label, "run": run_name, **run(regime, run_name, seeds)})
    return pd.DataFrame(rows)


#: The most often the extended laws may be called on a classical truth by design on a grid
#: whose constant is above the lowest inhibitor level: they are fitted only when the
#: lack-of-fit test fails (level 0.01) or one of the three families' probes fires (level
#: 0.001 each; below the lowest level the tight-binding probe counts at 0.05).
NOMINAL_OVER_CALLING = 0.01 + 3 * 0.001


def over_calling(table: pd.DataFrame) -> tuple[float, float]:
    """Share of plates of the classical regimes whose verdict's law is extended, and the
    share whose rates carry a warning, in the "after" run."""
    classical = [label for label, regime in REGIMES.items() if regime.classical]
    after = table[table["regime"].isin(classical) & (table["run"] == "after")]
    return float(after["extended law called"].mean()), float(after["rates flagged"].mean())


def markdown(table: pd.DataFrame, n_seeds: int) -> str:
    """docs/lack_of_fit.md from the table."""
    extended, flagged = over_calling(table)
    return (
        "# Lack of fit and the extended families: measured\n\n"
        f"`python -m benchmarks.lack_of_fit_study {n_seeds}`: {n_seeds} plates per regime "
        "from the mass-action ODE of tests/grid_ode.py read as absorbance (3 % read noise "
        "unless the regime says otherwise, 3 % pipetting scatter, 8 x 6 grid in "
        "duplicate), initial rates by `initial_rates` (linear windows), fitted by the "
        "batched engine (default weighting). *before*: rule 5 off and the rates stage's "
        "flags dropped; *after*: both on (the defaults). Km = 10 uM; Ki = 1 uM "
        "(uncompetitive 2, noncompetitive 1.5, mixed kic 1 / kiu 5), the standard "
        "inhibitor levels 0-8 uM; tight binding: Ki = 10 nM, [E] = 50 nM, inhibitor "
        "0-400 nM (and a classical competitive truth as potent, Ki = 5 nM, on the same "
        "levels with [E] = 20 pM); substrate inhibition Ksi = 30 uM; partial: ESI "
        "turns over at 0.3 kcat "
        "(kcat = 100/s, or 1/s with [E] = 2 nM for rapid equilibrium); product "
        "inhibition: E + P <-> EP with Kp = 1 uM.\n\n"
        "*correct*: the true law named, its Ki within 2x with an interval holding the "
        "truth; *flagged*: any other definite verdict whose rates carry a warning "
        "(the product_inhibition flag); *confidently wrong*: any other definite verdict "
        "(wrong name, or Ki more than 2x off or outside its interval, and no warning); "
        "*constant wrong*: the issue's own definition, a definite verdict whose Ki is "
        "more than 2x off or outside its interval, with no warning (a wrong name with "
        "the right constants is not counted; a 95 % interval alone misses the truth "
        "on 5 % of plates); "
        "*other*: no inhibition detected or failed; *right family named*: the verdict, or "
        "every candidate of an ambiguous one, is of the true law's family; *rates "
        "flagged*: plates whose fit "
        "carries the warning, whatever its class; *km interval misses*: among definite "
        "verdicts, km's interval excludes the truth (the linear-window rates' own bias, "
        "present on classical truths too). The issue's targets: confidently wrong <= "
        "5 %, the right family named in >= 80 % where the grid spans the effect; on "
        "classical truths the extended laws called no more often than the tests' "
        "nominal level.\n\n"
        f"**Over-calling on classical truths** (the five classical regimes, after): an "
        f"extended law named on {extended:.1%} of plates (nominal at most "
        f"{NOMINAL_OVER_CALLING:.1%}: the lack-of-fit test at 0.01 plus three probes at "
        f"0.001, and on grids whose constant is below the lowest inhibitor level the "
        f"tight-binding probe at 0.05), the rates flagged on {flagged:.1%}.\n\n"
        "```\n" + table.to_string(index=False, float_format="%.2f") + "\n```\n\n"
        + READING_NOTES)


READING_NOTES = """## Reading notes

- **Product inhibition** cannot be told from a classical grid by the rates alone when
  the product formed in the window is about the same in every well: linear-window
  rates then fit the classical law exactly with km and Ki both scaled by (1 + P/Kp),
  P the product in the window. What the reads do show is that the uninhibited wells
  bend faster than substrate depletion allows (rates/product_inhibition.py). At 0.5 %
  read noise that is flagged on practically every plate. At 3 % the reads do not carry
  it (measured): on 10 plates of the Kp = Km/10 regime the flag's plate sum had mean
  0.87 (sd 0.51) against -0.16 (0.52) on classical competitive plates, its level's
  quantile being 3.09; pooling every well instead of the uninhibited ones gives 1.39
  against 0.31 (sd 0.7): about one standard deviation apart, which no level separates.
  The whole-curve fit tells no more: with Kp held at 1e5, 10, 3, 1 and 0.3 uM the
  competitive fit's weighted sum of squares (about 2,900 reads, unit variance) moved by
  0.1-4 between Kp = 1e5 and the true 1 on 3 plates, lowest at 1e5 on all three, so a
  fitted Kp would not be placed either. What removes the bias is known at the bench:
  initial slopes (`method="curve"`, 0.01 confidently wrong but 0.75 `ambiguous`),
  shorter reads (the first 300 s: 0.04 confidently wrong, 0.02 constant wrong, 0.46
  correct, 0.50 ambiguous; half the product in the window) or the product's constant
  given to the whole-curve fit (`fit_progress_curves(product_ki=...)`: 0.90 correct,
  0.10 confidently wrong, as the classical competitive regime's 0.09). Integrated rates
  model depletion, not product: 0.56. The default route (600 s of reads, linear
  windows, no Kp) stays at 0.67; a flagged grid keeps its verdict with the warning
  first in its reason, in `MechanismFit.warnings` and in the ranking row's flags.
- **Partial inhibition** with kcat = 100/s: ESI turns over (30/s) nearly as fast as it
  dissociates (100/s), so the steady-state rates follow the rapid-equilibrium partial
  law only approximately (noise-free ODE rates of the standard grid fitted by
  noncompetitive_partial: ki 1.07 uM, beta 0.20 instead of 0.3, 1.5 % relative
  residuals; mixed_partial fits them better with alpha 1.18). The rapid-equilibrium
  regime (kcat = 1/s) is the law's own chemistry.
- **Rule 4 within each family**: an extended verdict's alpha is placed by the family's
  general law with alpha held at the edges (mixed_tb with alpha = 5 against mixed_tb),
  not by the classical mixed fit, which the data have already rejected. Where a
  family's own fits place alpha (tight binding) the ambiguity between the competitive
  and the mixed form goes; where they do not (substrate inhibition: on one plate
  examined mixed_si's alpha spanned 0.5-580, and the classical mixed fit did not reject
  alpha = 5 there either) the verdict stays ambiguous and names the competitive form as
  the lead: the right family, not yet the right law.
- **The floor of the confidently-wrong class.** A 95 % interval misses the truth on 5 %
  of plates by construction, and rule 2 rejects a true one-constant law against the
  general one on 5 % (its level): the remaining confidently wrong plates of the extended
  regimes are mostly of these two kinds (kic 1.2-1.4x off with an interval that just
  misses, "partial mixed" or "mixed, tight binding" on a truth with alpha = 1 or
  infinite), and the classical regimes show the same (0.05-0.11). The *constant wrong*
  column, the issue's own definition, leaves out the less specific names. Broken down
  (100 plates): partial at rapid equilibrium, the interval of ki misses on 6 of the 90
  plates named "partial noncompetitive" (5 high, 1 low; median estimate 1.02x the truth),
  7 of 94 from integrated rates: at the nominal 5 % within binomial scatter. Tight
  binding with [E] given: kic's interval misses on 6 of 93 plates named
  "competitive, tight binding", all high (1.17-1.32x; median estimate 1.035x, km high
  with it): the linear windows' low rates at low S. From the same plates' integrated
  rates (`initial_rates(method="integrated")`) the median is 0.99x, the misses 4 of 95
  and the constant wrong 0.06 (from 0.08): the rates stage's bias, not the fit's.
  Noise-free (read noise 1e-7, no pipetting scatter, [E] given) the linear windows put
  kic 2.1 % and km 2.4 % high, integrated rates and initial slopes 0.4 %: the windows'
  depletion bias (the uninhibited wells convert more in their window, so inhibition
  reads weaker) is why the misses lie on the high side. Profile intervals (lmfit path)
  on the 6 tight-binding misses without [E] missed the same way.
- **Tight binding without [E]**: the sign is the tight-binding probe ([E] fitted)
  beating mixed at the verdict's level `alpha` (0.05) on a grid whose classical
  constant lies below the lowest non-zero inhibitor level (`TIGHT_BINDING_LOWEST_FACTOR`
  = 1), or at `probe_alpha` anywhere. Before, the constant's position alone (below a
  third of the lowest level) was the sign and the probe counted only at 0.001: the
  tight-binding plates, whose classical kic (1.6-2.7x the truth: the apparent constant
  carries [E]/2) sits at 0.6-1.1x the lowest level with probe p of 0.002-0.07 (40
  plates examined), were
  "mixed" on 21 %, while a classical truth as potent with [E] far below Ki (the
  "Ki = 5 nM" regime) was "ambiguous" on 94 of 100 plates, its constant refused
  (rule 5 on, before this change; 0.86 correct now, with the tight-binding law named
  on 4 of 100, the price of the probe at 0.05). Left on the tight-binding regime (12
  of 100 constant wrong): 3 plates "mixed" with kic 1.9-2.8x whose constant lies just
  above the lowest level or whose probe gives p = 0.065, 6 "competitive, tight binding"
  whose interval just misses (as with [E] given), 3 "mixed, tight binding" with kic
  1.5-1.6x. Giving [E] remains the remedy. The 3 "mixed" plates: classical constant at
  0.74-1.12x the lowest level, probe p 0.011-0.065; the sign is the issue's own ("Ki
  below the lowest non-zero inhibitor level"), left as it is.
- **Tight binding with [E] given and fitted** (`fit_enzyme=True`, started at the
  given, true 50 nM; the same plates as the held run): 0.85 correct, 0.11 confidently
  wrong, 0.09 constant wrong, against 0.89 / 0.08 / 0.06 with [E] held (measured with
  `python -m benchmarks.lack_of_fit_study 100 tight`, which reproduced the other three
  rows of the table). The fitted [E] is unbiased (median 49.9 nM) and its interval (the
  engine's log-Wald) holds 50 nM on 87 of the 97 plates whose law carries a determined
  [E];
  kic's interval holds the truth on 88 % (91 % held). All 11 confidently wrong plates
  have kic within 2x (7.9-15.5 nM): 6 "competitive, tight binding" whose interval just
  misses (5 high, lower limits 10.0-10.4 nM, 4 of them with [E] fitted at 22-46 nM; 1
  low, upper limit 9.7 nM, with [E] at 67 nM: kic and [E] trade along one ridge), and 5
  "mixed, tight binding" (4 with [E] held). Profile intervals (lmfit path) on those plates
  gave the same verdicts and limits within a few %. The free [E] costs information;
  hold [E] when it is known (active-site titration), fit it when only a nominal [E]
  is.
- **Rule 5 on the idealised validation** (benchmarks/validation.py, the standard
  design with constant-SD noise and a mixed truth with alpha = 0.2, kiu = 0.1 = the
  lowest level / 4): on this code, the validation's own 200 seeds give an extended or
  inadequate verdict on 2.5 % (3 "mixed, tight binding", 1 inadequate, 1 "mixed with
  substrate inhibition"), 1,000 seeds on 3.8 % (2.8 % tight binding, 0.9 % inadequate,
  0.1 % substrate inhibition). The tight-binding calls are the probe counting at 0.05
  below the lowest level (its [E] >= 0 boundary makes it about half as often as its
  level), the inadequate ones the lack-of-fit test at 0.01: within the nominal 6 %, not
  a defect. (The 6.5 % of 200 recorded last session was not reproduced on this code.)
- **Ambiguous extended verdicts** ("competitive_si, mixed_si") state what is
  established from the family's general law (mixed_si, ksi included), not from the
  classical mixed fit the lack-of-fit test rejected; inadequate verdicts name
  "inhibition levels off below full" when the classical fit runs below the rates at the
  top inhibitor level and above them in the middle (the 2 inadequate plates of each
  partial regime).
"""


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 20
    # Texts after the count pick regimes by label (e.g. "tight" "competitive"): the table
    # is printed and docs/lack_of_fit.md, which holds every regime, is left alone.
    picked = tuple(sys.argv[2:])
    result = main(n, picked)
    if picked:
        print(result.to_string(index=False, float_format="%.2f"))
    else:
        text = markdown(result, n)
        Path("docs/lack_of_fit.md").write_text(text)
        print(text)
