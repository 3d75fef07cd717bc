"""Which reversible mechanism, and how tight: every model fitted, compared, decided.

:func:`fit_mechanisms` fits all five rate laws of :mod:`inhibkin.core.models` globally to one
compound's substrate × inhibitor grid (and the extended families' laws when rule 5 asks
for them), compares them (:mod:`inhibkin.core.compare`) and
returns a :class:`MechanismFit` holding the verdict and every table that justified it.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from functools import partial

import numpy as np
import pandas as pd

from ..core.bounds import NESTED_FAR_FACTOR, classical_limit
from ..core.compare import (
    EDGE_SIDES,
    EXACT_FIT_RTOL,
    TIGHT_BINDING_FACTOR,
    TIME_DEPENDENT,
    Verdict,
    VerdictOptions,
    comparison_table,
    decide,
    decide_extended,
    extension_signs,
    f_test,
    f_test_table,
    free_alpha,
    time_dependent_verdict,
)
from ..core.determined import DETERMINATION_FACTOR
from ..core.lack_of_fit import LACK_OF_FIT_ALPHA, lack_of_fit, residual_pattern
from ..core.models import EXTENDED_MODELS, FAMILIES, MODEL_NAMES, MODELS, extension_of, nested_start
from ..core.options import FitOptions, check_fit_enzyme
from ..core.readonly import readonly_frame, readonly_mapping
from ..core.starts import extra_start, log_bounds, mechanism_starts, starting_values
from ..core.weighting import (
    DEFAULT_WEIGHTING,
    REWEIGHT_ITERATIONS,
    SD_WEIGHTINGS,
    WEIGHTINGS,
    normalise_weights,
    rate_se_weights,
    relative_weights_from_fitted,
    resolve_weighting,
    weighting_label,
)
from ..display.text import text_table
from ..errors import DataError
from ..rates.product_inhibition import FLAG as PRODUCT_INHIBITION
from ..rates.product_inhibition import REASON as PRODUCT_INHIBITION_REASON
from ..rates.product_inhibition import product_inhibited_grid
from ..rates.time_dependence import flagged_inhibited
from ..units import header_column, parse_concentration, to_molar
from ..validate import check_grid, check_options
from .one_model import ModelFit, fit_model, fixed_alpha_ssr

__all__ = ["MechanismFit", "fit_mechanisms", "WEIGHTINGS", "DEFAULT_WEIGHTING",
           "relative_weights", "enzyme_concentration", "extended_starts",
           "needs_tight_binding", "tight_binding_inputs", "extension_gains", "mixed_starts",
           "molar_grid",
           "with_rate_flags"]



@dataclass(frozen=True)
class MechanismFit:
    """Every mechanism fitted to one compound, compared, and the verdict.

    Attributes
    ----------
    verdict : str
        A mechanism name, ``"ambiguous"``, ``"failed"`` or ``"time_dependent"`` (the
        rates stage flagged inhibited wells ``time_dependent``: no steady-state constant
        is valid, :meth:`constants` is empty; see
        :func:`inhibkin.core.compare.time_dependent_verdict`).
    best : str or None
        The model whose parameters stand for the compound (for ``ambiguous`` the
        one-constant candidate with the lowest AICc, which need not be the lowest AICc
        overall: see :attr:`basis`).
    candidates : tuple of str
        Models that could not be told apart (one entry when decided).
    reason : str
        Why this verdict.
    models : dict of str to ModelFit
        Every model's fit.
    comparison : pandas.DataFrame
        n, k, SSR, AIC, AICc, BIC, ΔAICc and Akaike weight per model.
    ftests : pandas.DataFrame
        Extra sum-of-squares F-test of every nested pair.
    data : pandas.DataFrame
        The points fitted (columns substrate, inhibitor, rate, weight).
    weighting : str
        The weighting as used: ``relative``, ``uniform``, ``sd`` or
        ``rate_se + variance model``.
    options : VerdictOptions
    lack_of_fit : pandas.DataFrame
        The lack-of-fit test of the verdict's classical model, and of the extended laws
        when they were tried: method (pure error / runs), statistic, p_value per model.
    warnings : tuple of str
        Warnings on the rates the fit was built on, whatever the verdict: ``product_
        inhibition`` when the rates stage flagged the grid's wells
        (:mod:`inhibkin.rates.product_inhibition`; the reason then starts with why, and
        a ranking row carries the flag).
    """

    verdict: str
    best: str | None
    candidates: tuple[str, ...]
    reason: str
    models: dict[str, ModelFit] = field(repr=False)
    comparison: pd.DataFrame = field(repr=False)
    ftests: pd.DataFrame = field(repr=False)
    data: pd.DataFrame = field(repr=False)
    weighting: str = DEFAULT_WEIGHTING
    options: VerdictOptions = VerdictOptions()
    lack_of_fit: pd.DataFrame = field(default=None, repr=False)
    warnings: tuple[str, ...] = ()

    def __post_init__(self):
        # Frozen all the way down: fit.models["mixed"] = ... and table edits are refused.
        object.__setattr__(self, "models", readonly_mapping(self.models, nested=False))
        if self.lack_of_fit is None:
            object.__setattr__(self, "lack_of_fit", _LACK_OF_FIT_FRAME.copy())
        for name in ("comparison", "ftests", "data", "lack_of_fit"):
            object.__setattr__(self, name, readonly_frame(getattr(self, name)))

    @property
    def params(self) -> pd.DataFrame:
        """Tidy parameter table of every model: model, parameter, estimate, se, ci_low,
        ci_high, determined."""
        return pd.concat([fit.to_frame() for fit in self.models.values()], ignore_index=True)

    @property
    def best_fit(self) -> ModelFit | None:
        """The ModelFit of :attr:`best`."""
        return self.models.get(self.best) if self.best else None

    @property
    def basis(self) -> str:
        """Which model the constants come from and why, in the terms of :attr:`comparison`.

        For ``ambiguous`` the constants are those of the one-constant candidate with the
        lowest AICc; when another model (mixed) has a lower AICc still, both ΔAICc values
        are named, so the sentence never contradicts the comparison table.
        """
        if self.verdict == TIME_DEPENDENT:
            return (f"no constants: the rates are not steady-state rates (the steady-state "
                    f"fits, best {self.best}, are kept for inspection only)")
        if self.best is None:
            return "no constants: the fit failed"
        if self.verdict == "inadequate":
            return f"no constants: {self.best} does not describe the data (lack of fit)"
        if self.best == "none":
            return "no inhibition constants (no inhibition detected)"
        if self.verdict != "ambiguous":
            return f"constants from {self.best}, the verdict"
        delta = self.comparison["delta_aicc"]
        text = f"constants from {self.best}, the one-constant candidate with the lowest AICc"
        lowest = delta.idxmin()
        if lowest != self.best and delta[self.best] > 0:
            text += (f" (ΔAICc {delta[self.best]:.2f}; {lowest} has the lowest AICc, "
                     f"ΔAICc 0)")
        return text

    @property
    def established(self):
        """What an ambiguous verdict still establishes (leading mechanism, determined
        constants, bounds on the others; :func:`inhibkin.mechanism.established.established`), or
        None for any other verdict."""
        from .established import established

        return established(self)

    def constants(self) -> pd.DataFrame:
        """The inhibition constants of the best model (kic, kiu, ki, alpha where present)."""
        fit = self.best_fit
        if fit is None or self.best == "none" or self.verdict in (TIME_DEPENDENT, "inadequate"):
            return pd.DataFrame(columns=["estimate", "se", "ci_low", "ci_high", "determined"])
        keep = [p for p in fit.params.index if p not in ("vmax", "km")]
        return fit.params.loc[keep]

    def to_frame(self) -> pd.DataFrame:
        """The tidy parameter table with a column saying which row is the verdict's model."""
        out = self.params
        out.insert(1, "is_best", out["model"] == self.best)
        return out

    def summary(self) -> str:
        """Plain-text report: verdict, comparison, F-tests and the best model's parameters."""
        width = 78
        lines = ["=" * width, f"Verdict: {self.verdict}", f"  {self.reason}"]
        if self.verdict in ("ambiguous", TIME_DEPENDENT):
            lines.append(f"  candidates: {', '.join(self.candidates)}; {self.basis}")
        if self.established is not None:  # only an ambiguous verdict has one
            lines.append(f"  established: {self.established.text()}")
        lines += ["-" * width, f"Model comparison ({self.weighting} weighting)",
                  text_table(self.comparison), "-" * width, "Nested F-tests",
                  text_table(self.ftests, index=False)]
        if len(self.lack_of_fit):
            lines += ["-" * width, "Lack of fit", text_table(self.lack_of_fit, index=False)]
        if self.best_fit is not None:
            lines += ["-" * width, self.best_fit.summary()]
        lines.append("=" * width)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from ..display.html import fit_html

        return fit_html(self)


_LACK_OF_FIT_FRAME = pd.DataFrame(columns=["model", "method", "statistic", "p_value"])


def lack_of_fit_rows(fits, names, s, i, w, exact_ssr=0.0, relative=False) -> pd.DataFrame:
    """The lack-of-fit test of each converged model of ``names`` on weighted residuals.

    With ``relative`` (constant-CV weighting) each model is judged on its own relative
    residuals (v − v̂)/v̂: the shared weights come from the classical mixed fit, which
    misweights the very grids that fail it. An exact fit (SSR at or below
    ``exact_ssr``) has no lack of fit: its p-value is NaN, never a comparison of
    rounding errors."""
    rows = []
    mask = np.ones((1, len(s)), bool)
    for name in names:
        fit = fits.get(name)
        if fit is None or not fit.converged:
            continue
        scaled = (fit.residuals / np.where(fit.fitted > 0, fit.fitted, np.inf) if relative
                  else w * fit.residuals)
        method, statistic, p_value = lack_of_fit(scaled[None], s[None], i[None], mask,
                                                 fit.n_params)
        exact = fit.ssr <= exact_ssr
        rows.append({"model": name, "method": method[0],
                     "statistic": np.nan if exact else statistic[0],
                     "p_value": np.nan if exact else p_value[0]})
    return pd.DataFrame(rows, columns=_LACK_OF_FIT_FRAME.columns)


def extended_starts(name, fits, s, i, v, w, enzyme=None) -> list[dict]:
    """Starts of the extended law ``name``: its automatic start; the classical law's
    solution with the family's constant at its start (:func:`inhibkin.core.starts.
    extra_start`) and at its classical limit (:func:`inhibkin.core.bounds.classical_limit`),
    so that its SSR is no
    larger than the classical one; and each nested law of its family's solution."""
    law = MODELS[name]
    rows = [x[None] for x in (s, i, v)]
    everywhere = np.ones((1, len(s)), bool)
    held = None if enzyme is None else np.array([enzyme])
    starts = [dict(zip(law.param_names, mechanism_starts(name, *rows, everywhere, w[None],
                                                         held)[0]))]
    extra = law.param_names[-1]
    classical = fits.get(law.extends)
    if classical is not None and classical.converged:
        low, high = log_bounds(name, s, i, v)[extra]
        for value in (extra_start(law.roles[-1], *rows[:2], everywhere)[0],
                      classical_limit(law.roles[-1], low, high)):
            starts.append({**classical.best_values, extra: float(value)})
    for small, fit in fits.items():
        if (fit.converged and name in MODELS[small].nests_in
                and MODELS[small].family == law.family):
            far = float(np.exp(log_bounds(name, s, i, v)["kic"][1])) / NESTED_FAR_FACTOR \
                if "kic" in law.param_names else float(np.max(s))
            starts.append(nested_start(small, fit.best_values, name, far))
    return starts


def tight_binding_inputs(fits, best, i):
    """(tight_constant, lowest_inhibitor) of rule 5: the tightest ranking constant of the
    classical verdict's model ``best`` (NaN without one) and the lowest non-zero
    inhibitor level."""
    positive = i[i > 0]
    lowest = float(positive.min()) if positive.size else np.nan
    fit = fits.get(best) if best else None
    if fit is None or not fit.converged or not MODELS[best].ranking:
        return np.nan, lowest
    return float(fit.params.loc[list(MODELS[best].ranking), "estimate"].min()), lowest


def extended_verdict(verdict, fits, ftests, s, i, v, w, options, common, exact_ssr,
                     relative=False, enzyme=None, fit_enzyme=False):
    """Rule 5 of :mod:`inhibkin.core.compare` on one compound: the lack-of-fit test of the
    verdict's model and, when it fails (or the tight-binding rule applies), the extended
    laws of every family fitted and decided (a given [E] held, or fitted from it with
    ``fit_enzyme``).

    Returns the verdict, every fit, the F-tests of the new pairs and the lack-of-fit rows.
    """
    tested = lack_of_fit_rows(fits, [verdict.best] if verdict.best else [], s, i, w,
                              exact_ssr, relative)
    none = (verdict, fits, None, tested)
    if not len(tested) or options.lack_of_fit_alpha <= 0:
        return none
    p_lof = float(tested["p_value"].iloc[0])
    tight, lowest = tight_binding_inputs(fits, verdict.best, i)
    decide = partial(decide_extended, verdict, lack_of_fit_p=p_lof, options=options,
                     enzyme=enzyme, fit_enzyme=fit_enzyme, tight_constant=tight,
                     lowest_inhibitor=lowest)
    signs = verdict.best != "none" and extension_signs(
        extension_gains(fits, s, i, v, w, exact_ssr, enzyme, fit_enzyme), tight, lowest,
        options, enzyme, fit_enzyme)
    if not (p_lof < options.lack_of_fit_alpha or needs_tight_binding(tight, enzyme) or signs):
        out = decide(pattern="", p_value=lambda a, b: np.nan, converged=lambda m: False,
                     aicc=lambda m: np.inf, extended_lack_of_fit_p=lambda m: np.nan)
        return (out, fits, None, tested) if out is not verdict else none
    extended = {}
    for name in EXTENDED_MODELS:
        law = MODELS[name]
        if law.extends in fits and name not in extended:
            starts = extended_starts(name, {**fits, **extended}, s, i, v, w, enzyme)
            extended[name] = fit_model(name, s, i, v, w, enzyme=enzyme,
                                       fit_enzyme=fit_enzyme, starts=starts, **common)
    every = {**fits, **extended}
    every = {name: every[name] for name in MODELS if name in every}
    # Every nested pair, then the classical fixed-alpha tests (rule 4), then each
    # family's own (rule 4 within the family, for its verdict).
    family_alpha = [_fixed_alpha_tests(every, s, i, v, w, options, exact_ssr, general,
                                       enzyme, fit_enzyme)
                    for general in (extension_of("mixed", f) for f in FAMILIES)
                    if general in every]
    tests = pd.concat([f_test_table(every, exact_ssr=exact_ssr),
                       ftests[~ftests["reduced"].isin(MODELS)], *family_alpha],
                      ignore_index=True)
    comparison = comparison_table(every)
    converged = set(comparison.index[comparison["converged"]])
    extended_lof = lack_of_fit_rows(every, list(extended), s, i, w, exact_ssr,
                                    relative).set_index("model")
    pattern = residual_pattern((w * fits[verdict.best].residuals)[None], s[None],
                               np.ones((1, len(s)), bool), i[None])[0]
    out = decide(
        pattern=pattern, p_value=lambda reduced, full: _p_of(tests, reduced, full),
        free_alpha=lambda law: free_alpha(every[law].best_values) if law in converged
        else np.nan,
        converged=lambda name: name in converged,
        aicc=lambda name: float(comparison.loc[name, "aicc"]) if name in converged
        else np.inf,
        extended_lack_of_fit_p=lambda name: float(extended_lof.loc[name, "p_value"])
        if name in extended_lof.index else np.nan,
        fitted_enzyme=lambda law: _fitted_enzyme(every.get(law)))
    rows = pd.concat([tested, extended_lof.reset_index()], ignore_index=True)
    return out, every, tests, rows


def _fitted_enzyme(fit):
    """(estimate, ci_low, ci_high, determined) of a converged tight-binding fit's [E]."""
    if fit is None or not fit.converged or "enzyme" not in fit.params.index:
        return None
    row = fit.params.loc["enzyme"]
    return (float(row["estimate"]), float(row["ci_low"]), float(row["ci_high"]),
            bool(row["determined"]))


def extension_gains(fits, s, i, v, w, exact_ssr, enzyme=None, fit_enzyme=False) -> dict:
    """Per family, the p-value of the F-test of mixed against the family's general law (a
    quick probe with Wald intervals; [E] fitted, from the given [E] with ``fit_enzyme``;
    NaN when mixed did not converge, and for tight binding with [E] held, which adds no
    constant)."""
    mixed = fits.get("mixed")
    gains = {}
    for family in FAMILIES:
        name = extension_of("mixed", family)
        held = family == "tight_binding" and enzyme is not None and not fit_enzyme
        if mixed is None or not mixed.converged or held:
            gains[family] = np.nan
            continue
        start = enzyme if family == "tight_binding" else None
        probe = fit_model(name, s, i, v, w, intervals="wald", enzyme=start, fit_enzyme=True,
                          starts=extended_starts(name, fits, s, i, v, w, start))
        # Mixed's SSR is no larger than that of any law nested in it (an optimiser that
        # stopped short on a ridge can leave it above); a gain below the exact-fit scale
        # is rounding (noise-free data), not a gain.
        ssr = [min(x.ssr for x in fits.values() if x.converged and x.model in MODEL_NAMES),
               probe.ssr]
        ssr = [x if x > exact_ssr else 0.0 for x in ssr]
        real = probe.converged and ssr[0] - ssr[1] > exact_ssr
        gains[family] = f_test(ssr[0], mixed.dof, ssr[1], probe.dof)[1] if real else np.nan
    return gains


def needs_tight_binding(tight_constant, enzyme) -> bool:
    """The tight-binding rule: [E] given and the classical constant below
    TIGHT_BINDING_FACTOR × [E]."""
    return enzyme is not None and tight_constant < TIGHT_BINDING_FACTOR * enzyme


def _p_of(tests, reduced, full):
    row = tests[(tests["reduced"] == reduced) & (tests["full"] == full)]
    return float(row["p_value"].iloc[0]) if len(row) else np.nan


def molar_grid(df, *, substrate="substrate", inhibitor="inhibitor", rate="rate", sd=None,
               need_inhibition=True, context=None, allow_zero_sd=False):
    """One compound's grid validated, its concentrations in M where the headers declare a unit.

    ``substrate`` and ``inhibitor`` are found as :func:`inhibkin.units.header_column`
    finds them: ``"substrate"`` names a column ``substrate`` (values in its own unit) or
    one header that declares the unit, ``substrate_uM`` or ``substrate (mM)``, whose
    values are converted to M. The checks (:func:`inhibkin.validate.check_grid`) run on
    the table as given, so a message names the header, row and value the user wrote.

    Parameters
    ----------
    df : pandas.DataFrame
        One row per observed rate.
    substrate, inhibitor, rate, sd : str
        Column names or base names (see above); ``sd`` is optional.
    need_inhibition : bool
        Require at least two inhibitor levels.
    context : str, optional
        Put in front of error messages (e.g. the compound).
    allow_zero_sd : bool
        As :func:`inhibkin.validate.check_grid`.

    Returns
    -------
    s, i, v, sd : numpy.ndarray
        Substrate and inhibitor (M when declared, else the column's unit), rates, and
        standard deviations (None when ``sd`` is not given).
    units : dict
        ``{"substrate": unit or None, "inhibitor": unit or None}`` as declared.

    Raises
    ------
    DataError
        As :func:`inhibkin.validate.check_grid`; UnitsError when two headers declare
        one concentration.
    """
    (s_column, s_unit), (i_column, i_unit) = (header_column(df.columns, name)
                                              for name in (substrate, inhibitor))
    s, i, v, sigma = check_grid(df, substrate=s_column, inhibitor=i_column, rate=rate, sd=sd,
                                need_inhibition=need_inhibition, context=context,
                                allow_zero_sd=allow_zero_sd)
    if s_unit:
        s = to_molar(s, s_unit)
    if i_unit:
        i = to_molar(i, i_unit)
    return s, i, v, sigma, {"substrate": s_unit, "inhibitor": i_unit}


def with_rate_flags(fit: MechanismFit, flags) -> MechanismFit:
    """``fit`` with what the rates stage's well flags say about its rates.

    Both solvers' fits pass through here, so each rule is applied once: rule 6 of
    :mod:`inhibkin.core.compare` (inhibited wells flagged ``time_dependent``: the verdict
    becomes ``time_dependent``) and the product-inhibition warning (wells flagged
    ``product_inhibition`` by :mod:`inhibkin.rates.product_inhibition`: the verdict keeps
    its name, its reason starts with the warning and :attr:`MechanismFit.warnings`
    names it, so no constant read from such rates is shown without it).

    Parameters
    ----------
    fit : MechanismFit
    flags : array-like of str
        The rates stage's flags of every point of ``fit.data``, in its order.

    Returns
    -------
    MechanismFit
        ``fit`` itself when no rule applies.
    """
    steady = Verdict(fit.verdict, fit.best, fit.candidates, fit.reason)
    verdict = time_dependent_verdict(steady, *flagged_inhibited(flags, fit.data["inhibitor"]))
    changes = {}
    if verdict is not steady:
        changes.update(verdict=verdict.verdict, reason=verdict.reason)
    if product_inhibited_grid(flags) and PRODUCT_INHIBITION not in fit.warnings:
        changes.update(reason=f"{PRODUCT_INHIBITION_REASON}; {changes.get('reason', fit.reason)}",
                       warnings=(*fit.warnings, PRODUCT_INHIBITION))
    return dataclasses.replace(fit, **changes) if changes else fit


def enzyme_concentration(df, enzyme, inhibitor_unit, context=None):
    """The active enzyme concentration of one compound's grid, in the fitted inhibitor's
    unit (M when the inhibitor's header declares a unit), or None.

    Parameters
    ----------
    df : pandas.DataFrame
        The grid; a column ``enzyme_<unit>`` (or ``enzyme (unit)``) is read when
        ``enzyme`` is None, and must hold one positive value.
    enzyme : float, str or None
        A number (in the inhibitor's unit as fitted), text with its unit (``"20nM"``,
        converted to M: the inhibitor's header must then declare a unit), or the name of
        a column.
    inhibitor_unit : str or None
        The unit the inhibitor's header declares.
    """
    columns = getattr(df, "columns", ())
    column = None
    if enzyme is None or (isinstance(enzyme, str) and enzyme in columns):
        column, unit = header_column(columns, "enzyme" if enzyme is None else enzyme)
        if column not in columns:
            return None
        values = pd.to_numeric(df[column], errors="coerce").to_numpy(dtype=float)
        if not (np.all(np.isfinite(values)) and np.all(values > 0)
                and np.all(values == values[0])):
            raise DataError(f"column {column!r}: the active enzyme concentration must be "
                            "one positive number per compound", context)
        value = to_molar(values[0], unit) if unit else values[0]
        molar = unit is not None
    elif isinstance(enzyme, str):
        value, molar = parse_concentration(enzyme), True
    else:
        value, molar = float(enzyme), inhibitor_unit is not None
    check_options({"enzyme": value})
    if molar and inhibitor_unit is None:
        raise DataError(f"enzyme {enzyme if column is None else column!r} has a unit but "
                        "the inhibitor column declares none: declare it (inhibitor_uM)",
                        context)
    return float(value)


def relative_weights(s, i, v) -> np.ndarray:
    """Residual multipliers 1/v̂ for constant-CV noise, v̂ from the mixed model.

    The weights are set once, from a reweighted fit of the most general model, and then
    shared by every model: that keeps the SSRs of all models on one scale, so the
    F-tests and information criteria compare like with like.
    """
    w = np.ones_like(v)
    everywhere = np.ones((1, len(v)), bool)
    for _ in range(REWEIGHT_ITERATIONS):
        fit = fit_model("mixed", s, i, v, w, intervals="wald")
        if not fit.converged:
            break
        w = relative_weights_from_fitted(fit.fitted[None], everywhere)[0]
    return normalise_weights(w[None], everywhere)[0]


def mixed_starts(fits, s, i, v, w) -> list[dict]:
    """Starting points for mixed: the automatic one and each nested model's solution.

    Starting from the nested solutions guarantees the mixed SSR is no larger than any
    model nested in it, which the F-tests rely on.
    """
    starts = [starting_values("mixed", s, i, v, w)]
    far = float(np.exp(log_bounds("mixed", s, i, v)["kic"][1])) / NESTED_FAR_FACTOR
    for name, fit in fits.items():
        if not fit.converged or name == "none" or "mixed" not in MODELS[name].nests_in:
            continue
        starts.append(nested_start(name, fit.best_values, "mixed", far))
    return starts


def _fixed_alpha_tests(fits, s, i, v, w, options, exact_ssr, model="mixed",
                       enzyme=None, fit_enzyme=False) -> pd.DataFrame:
    """F-tests of mixed (or a family's general law, ``model``) with alpha held at each
    edge of :meth:`VerdictOptions.alpha_values` against the same law free (1 numerator
    df): rule 4 of the verdict, within the family's own laws for an extended one.

    Starts: the law's solution and each converged law nested in it of the same family
    (as mixed's own starts)."""
    general = fits[model]
    if not general.converged:
        return pd.DataFrame([{"reduced": options.alpha_row(value, model), "full": model,
                              "f_value": np.nan, "df_num": 1, "df_den": general.dof,
                              "p_value": np.nan, "free_alpha": np.nan}
                             for value in options.alpha_values])
    law = MODELS[model]
    (ratio,) = law.derived  # alpha = kiu/kic
    p = general.best_values
    far = float(np.exp(log_bounds(model, s, i, v)["kic"][1])) / NESTED_FAR_FACTOR
    starts = [{name: p[name] for name in law.param_names}]
    starts += [nested_start(name, fit.best_values, model, far) for name, fit in fits.items()
               if fit.converged and MODELS[name].inhibition_constants
               and model in MODELS[name].nests_in and MODELS[name].family == law.family]
    ssr_full = general.ssr if general.ssr > exact_ssr else 0.0
    rows = []
    for value in options.alpha_values:
        held = [{**x, ratio.numerator: value * x[ratio.denominator]} for x in starts]
        ssr = fixed_alpha_ssr(s, i, v, w, value, held, model, enzyme, fit_enzyme)
        if np.isfinite(ssr):
            f_value, p_value, df_num, df_den = f_test(ssr if ssr > exact_ssr else 0.0,
                                                      general.dof + 1, ssr_full, general.dof)
        else:
            f_value, p_value, df_num, df_den = np.nan, np.nan, 1, general.dof
        rows.append({"reduced": options.alpha_row(value, model), "full": model,
                     "f_value": f_value, "df_num": df_num, "df_den": df_den,
                     "p_value": p_value, "free_alpha": free_alpha(p)})
    return pd.DataFrame(rows)


def fit_mechanisms(df, *, substrate="substrate", inhibitor="inhibitor", rate="rate", sd=None,
                   weighting=None, models=MODEL_NAMES, alpha=0.05, min_delta_aicc=2.0,
                   alpha_factor=5.0, intervals="profile", level=0.95,
                   determination_factor=DETERMINATION_FACTOR, flags="flags",
                   lack_of_fit_alpha=LACK_OF_FIT_ALPHA, enzyme=None, fit_enzyme=False,
                   edge_sides=EDGE_SIDES, context=None) -> MechanismFit:
    """Fit every reversible mechanism to one compound's grid and decide between them.

    Parameters
    ----------
    df : pandas.DataFrame
        One row per observed initial rate (replicates as separate rows).
    substrate, inhibitor, rate : str
        Column names. A header that declares its unit (``substrate_uM``,
        ``inhibitor_nM``, as the command line writes them) is found by its base name and
        read in M, so km and the inhibition constants come out in M; a plain header
        (``substrate``) keeps its values' own unit, and km comes out in the substrate's
        unit, the inhibition constants in the inhibitor's (see :func:`molar_grid`).
        vmax is in the rate's unit.
    sd : str, optional
        Column of the standard deviation of each rate; required for ``weighting="sd"``
        (for ``rate_se``, the column of standard errors, default ``rate_se``).
    weighting : {None, "relative", "uniform", "sd", "rate_se"}
        None (default): ``rate_se`` when the table has a ``rate_se`` column (as
        :func:`inhibkin.initial_rates` writes it) and ``sd`` is not given, else
        ``relative`` (:data:`DEFAULT_WEIGHTING`). ``rate_se``: weights 1/sd with
        sd² = rate_se² + a² + (b·v̄)², the variance model fitted from the replicates
        (:func:`inhibkin.core.weighting.rate_se_weights`; the result's ``weighting``
        reads ``rate_se + variance model``). ``relative``: constant coefficient of
        variation (weights 1/v̂, see :func:`relative_weights`). ``uniform``: equal
        weights (constant standard deviation). ``sd``: weights 1/sd.
    models : sequence of str
        Models to fit; the verdict needs ``none`` and ``mixed`` among them.
    alpha : float
        Level of the nested F-tests behind the verdict.
    min_delta_aicc : float
        AICc lead needed to pick one of the one-constant mechanisms.
    alpha_factor : float
        A one-constant mechanism is called only when the data also reject mixed with
        alpha = kiu/kic held at the edge of the region its name claims (alpha_factor for
        competitive, 1/alpha_factor for uncompetitive, both for noncompetitive); see
        :func:`inhibkin.core.compare.edge_rejected`.
    intervals : {"profile", "wald"}
        Interval method (see :mod:`inhibkin.mechanism.one_model`).
    level : float
        Confidence level of the intervals.
    determination_factor : float
        A constant above this multiple of the largest tested concentration is reported
        as a bound, "not determined within the tested range".
    flags : str
        Column of the rates stage's well flags (``InitialRates.table["flags"]``), if
        present: when an inhibited well carries ``time_dependent`` the verdict is
        ``time_dependent`` and no constant is reported; when wells carry
        ``product_inhibition`` the reason and :attr:`MechanismFit.warnings` say so
        (:func:`with_rate_flags`).
    lack_of_fit_alpha : float
        Level of the lack-of-fit test of the verdict's model (default 0.01; 0 turns rule
        5 off). When the model fails it, a family's general law beats mixed at
        ``VerdictOptions.probe_alpha`` (0.001), or a given [E] is within 10× of
        the constant, the extended laws (substrate inhibition, tight binding, partial
        inhibition) are fitted and decided (rule 5 of :mod:`inhibkin.core.compare`):
        the verdict names one
        ("competitive with substrate inhibition", "competitive, tight binding",
        "partial mixed") or is ``inadequate``.
    enzyme : float or str, optional
        The active enzyme concentration [E]: a number in the inhibitor's unit as fitted
        (M when its header declares a unit), text with its unit (``"20nM"``), or a
        column; without it a column ``enzyme_<unit>`` is read when present. The
        tight-binding laws then hold [E] there, and a classical constant below
        :data:`~inhibkin.core.compare.TIGHT_BINDING_FACTOR` (10) × [E] sends the verdict
        to them (Morrison 1969, BBA 185:269). Without [E] they fit it, and a constant
        below the lowest non-zero inhibitor level makes the verdict ``ambiguous``.
    fit_enzyme : bool
        False (default): a given [E] is held. True: the tight-binding laws fit [E]
        (within positive bounds, inhibitor's unit), the given value as the start: [E] is
        then a fitted parameter, reported with its interval (or as an upper limit when
        the data do not determine it), the tight-binding family must beat mixed by its
        F-test unless the 10 × [E] rule (on the given [E]) sends the verdict there, and
        the verdict's reason says "[E] fitted". It needs [E]: without it the
        tight-binding laws fit [E] anyway, so asking is taken as a forgotten [E]
        (:func:`inhibkin.core.options.check_fit_enzyme`, an ``OptionError``).
    edge_sides : {1, 2}
        Rule 4's edge test (:func:`inhibkin.core.compare.edge_rejected`): 2 (default)
        two-sided; 1 one-sided, the edge rejected only when the free alpha lies beyond
        it (more correct calls of one-constant truths near an edge, more confidently
        wrong ones of mixed truths at an edge on badly placed designs; figures of both
        in docs/validation.md).
    context : str, optional
        Name of the compound, used in error messages.

    Returns
    -------
    MechanismFit

    Raises
    ------
    OptionError
        When an option is outside its allowed values (:class:`inhibkin.core.options.FitOptions`),
        before any fit.
    DataError
        When the table cannot be fitted (missing column, text, NaN, negative values,
        too few points or levels, all-zero rates); the message names column, row, value.

    Examples
    --------
    >>> import inhibkin as ik
    >>> data = ik.simulate_grid("competitive", vmax=10, km=2, kic=0.5, cv=0.02, seed=1)
    >>> ik.fit_mechanisms(data, weighting="relative").verdict
    'competitive'
    """
    weighting, sd = resolve_weighting(weighting, getattr(df, "columns", ()), sd)
    fit_options = FitOptions(weighting=weighting, intervals=intervals, level=level,
                             alpha=alpha, min_delta_aicc=min_delta_aicc,
                             alpha_factor=alpha_factor,
                             determination_factor=determination_factor,
                             lack_of_fit_alpha=lack_of_fit_alpha, edge_sides=edge_sides,
                             fit_enzyme=fit_enzyme)
    if weighting == "sd" and sd is None:
        raise DataError("weighting='sd' needs the sd= column of standard deviations", context)
    unknown = [m for m in models if m not in MODELS]
    if unknown:
        raise DataError(f"unknown models {unknown}; known: {', '.join(MODELS)}", context)
    need_inhibition = any(m != "none" for m in models)
    s, i, v, sigma, units = molar_grid(df, substrate=substrate, inhibitor=inhibitor,
                                       rate=rate, sd=sd if weighting in SD_WEIGHTINGS else None,
                                       need_inhibition=need_inhibition, context=context,
                                       allow_zero_sd=weighting == "rate_se")
    enzyme = enzyme_concentration(df, enzyme, units["inhibitor"], context)
    check_fit_enzyme(fit_options.fit_enzyme, enzyme, context)
    if weighting == "rate_se":
        everywhere = np.ones((1, len(v)), bool)
        w = rate_se_weights(s[None], i[None], v[None], sigma[None], everywhere)[0]
    elif weighting == "sd":
        w = 1.0 / sigma
    elif weighting == "relative":
        w = relative_weights(s, i, v)
    else:
        w = np.ones_like(v)
    options = VerdictOptions(alpha=fit_options.alpha, min_delta_aicc=fit_options.min_delta_aicc,
                             alpha_factor=fit_options.alpha_factor,
                             lack_of_fit_alpha=fit_options.lack_of_fit_alpha,
                             edge_sides=fit_options.edge_sides)
    fits: dict[str, ModelFit] = {}
    common = dict(intervals=fit_options.intervals, level=fit_options.level,
                  determination_factor=fit_options.determination_factor)
    for name in models:
        starts = mixed_starts(fits, s, i, v, w) if name == "mixed" else None
        fits[name] = fit_model(name, s, i, v, w, starts=starts, enzyme=enzyme,
                               fit_enzyme=fit_options.fit_enzyme, **common)
    # The table order is the models' own order, whatever order they were fitted in.
    fits = {name: fits[name] for name in MODELS if name in fits}
    comparison = comparison_table(fits)
    exact_ssr = EXACT_FIT_RTOL * float(np.sum((w * v) ** 2))
    ftests = f_test_table(fits, exact_ssr=exact_ssr)
    if "mixed" in fits and fits["mixed"].converged:
        ftests = pd.concat([ftests, _fixed_alpha_tests(fits, s, i, v, w, options, exact_ssr)],
                           ignore_index=True)
    verdict: Verdict = decide(comparison, ftests, options)
    verdict, every, tests, lack = extended_verdict(verdict, fits, ftests, s, i, v, w, options,
                                                   common, exact_ssr,
                                                   relative=weighting == "relative",
                                                   enzyme=enzyme,
                                                   fit_enzyme=fit_options.fit_enzyme)
    if tests is not None:
        fits, comparison, ftests = every, comparison_table(every), tests
    data = pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v, "weight": w},
                        index=df.index)
    fit = MechanismFit(verdict.verdict, verdict.best, verdict.candidates, verdict.reason,
                       fits, comparison, ftests, data, weighting_label(weighting), options, lack)
    return with_rate_flags(fit, df[flags]) if flags in df.columns else fit
