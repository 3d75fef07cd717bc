"""Which reversible mechanism, and how tight: every model fitted, compared, decided.

:func:`fit_mechanisms` fits all five rate laws of :mod:`inhibkin.models` globally to one
compound's substrate × inhibitor grid, compares them (:mod:`inhibkin.compare`) and
returns a :class:`MechanismFit` holding the verdict and every table that justified it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .compare import (
    EXACT_FIT_RTOL,
    Verdict,
    VerdictOptions,
    comparison_table,
    decide,
    f_test,
    f_test_table,
)
from .core.bounds import NESTED_FAR_FACTOR
from .core.determined import DETERMINATION_FACTOR
from .core.options import FitOptions
from .core.readonly import readonly_frame, readonly_mapping
from .core.weighting import (
    DEFAULT_WEIGHTING,
    REWEIGHT_ITERATIONS,
    WEIGHTINGS,
    normalise_weights,
    relative_weights_from_fitted,
)
from .errors import DataError
from .fitting import ModelFit, fit_model, fixed_alpha_ssr
from .models import MODEL_NAMES, MODELS, nested_start
from .starts import log_bounds, starting_values
from .text import text_table
from .units import header_column, to_molar
from .validate import check_grid

__all__ = ["MechanismFit", "fit_mechanisms", "WEIGHTINGS", "DEFAULT_WEIGHTING",
           "relative_weights", "mixed_starts", "molar_grid"]



@dataclass(frozen=True)
class MechanismFit:
    """Every mechanism fitted to one compound, compared, and the verdict.

    Attributes
    ----------
    verdict : str
        A mechanism name, ``"ambiguous"`` or ``"failed"``.
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
    options : VerdictOptions
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

    def __post_init__(self):
        # Frozen all the way down: fit.models["mixed"] = ... and table edits are refused.
        object.__setattr__(self, "models", readonly_mapping(self.models, nested=False))
        for name in ("comparison", "ftests", "data"):
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
        if self.best is None:
            return "no constants: the fit failed"
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
        constants, bounds on the others; :func:`inhibkin.established.established`), or
        None for any other verdict."""
        from .established import established

        return established(self)

    def constants(self) -> pd.DataFrame:
        """The inhibition constants of the best model (kic, kiu, ki, alpha where present)."""
        fit = self.best_fit
        if fit is None or self.best == "none":
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
        if self.verdict == "ambiguous":
            lines.append(f"  candidates: {', '.join(self.candidates)}; {self.basis}")
            lines.append(f"  established: {self.established.text()}")
        lines += ["-" * width, f"Model comparison ({self.weighting} weighting)",
                  text_table(self.comparison), "-" * width, "Nested F-tests",
                  text_table(self.ftests, index=False)]
        if self.best_fit is not None:
            lines += ["-" * width, self.best_fit.summary()]
        lines.append("=" * width)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from .display.html import fit_html  # matplotlib is loaded only when a notebook asks

        return fit_html(self)


def molar_grid(df, *, substrate="substrate", inhibitor="inhibitor", rate="rate", sd=None,
               need_inhibition=True, context=None):
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
                                need_inhibition=need_inhibition, context=context)
    if s_unit:
        s = to_molar(s, s_unit)
    if i_unit:
        i = to_molar(i, i_unit)
    return s, i, v, sigma, {"substrate": s_unit, "inhibitor": i_unit}


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


def _fixed_alpha_tests(fits, s, i, v, w, options, exact_ssr) -> pd.DataFrame:
    """F-tests of mixed with alpha held at each edge of :meth:`VerdictOptions.alpha_values`
    against mixed (1 numerator df): rule 4 of the verdict."""
    mixed = fits["mixed"]
    law = MODELS["mixed"]
    (ratio,) = law.derived  # alpha = kiu/kic
    p = mixed.best_values
    starts = [{name: p[name] for name in law.param_names}, *mixed_starts(fits, s, i, v, w)[1:]]
    ssr_full = mixed.ssr if mixed.ssr > exact_ssr else 0.0
    rows = []
    for value in options.alpha_values:
        held = [{**x, ratio.numerator: value * x[ratio.denominator]} for x in starts]
        ssr = fixed_alpha_ssr(s, i, v, w, value, held)
        if np.isfinite(ssr):
            f_value, p_value, df_num, df_den = f_test(ssr if ssr > exact_ssr else 0.0,
                                                      mixed.dof + 1, ssr_full, mixed.dof)
        else:
            f_value, p_value, df_num, df_den = np.nan, np.nan, 1, mixed.dof
        rows.append({"reduced": options.alpha_row(value), "full": "mixed", "f_value": f_value,
                     "df_num": df_num, "df_den": df_den, "p_value": p_value})
    return pd.DataFrame(rows)


def fit_mechanisms(df, *, substrate="substrate", inhibitor="inhibitor", rate="rate", sd=None,
                   weighting=DEFAULT_WEIGHTING, models=MODEL_NAMES, alpha=0.05, min_delta_aicc=2.0,
                   alpha_factor=5.0, intervals="profile", level=0.95,
                   determination_factor=DETERMINATION_FACTOR, context=None) -> MechanismFit:
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
        Column of the standard deviation of each rate; required for ``weighting="sd"``.
    weighting : {"relative", "uniform", "sd"}
        ``relative`` (default, :data:`DEFAULT_WEIGHTING`): constant coefficient of
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
        :mod:`inhibkin.compare`.
    intervals : {"profile", "wald"}
        Interval method (see :mod:`inhibkin.fitting`).
    level : float
        Confidence level of the intervals.
    determination_factor : float
        A constant above this multiple of the largest tested concentration is reported
        as a bound, "not determined within the tested range".
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
    fit_options = FitOptions(weighting=weighting, intervals=intervals, level=level,
                             alpha=alpha, min_delta_aicc=min_delta_aicc,
                             alpha_factor=alpha_factor,
                             determination_factor=determination_factor)
    if weighting == "sd" and sd is None:
        raise DataError("weighting='sd' needs the sd= column of standard deviations", context)
    unknown = [m for m in models if m not in MODELS]
    if unknown:
        raise DataError(f"unknown models {unknown}; known: {', '.join(MODELS)}", context)
    need_inhibition = any(m != "none" for m in models)
    s, i, v, sigma, _ = molar_grid(df, substrate=substrate, inhibitor=inhibitor, rate=rate,
                                   sd=sd if weighting == "sd" else None,
                                   need_inhibition=need_inhibition, context=context)
    if weighting == "sd":
        w = 1.0 / sigma
    elif weighting == "relative":
        w = relative_weights(s, i, v)
    else:
        w = np.ones_like(v)
    options = VerdictOptions(alpha=fit_options.alpha, min_delta_aicc=fit_options.min_delta_aicc,
                             alpha_factor=fit_options.alpha_factor)
    fits: dict[str, ModelFit] = {}
    common = dict(intervals=fit_options.intervals, level=fit_options.level,
                  determination_factor=fit_options.determination_factor)
    for name in models:
        starts = mixed_starts(fits, s, i, v, w) if name == "mixed" else None
        fits[name] = fit_model(name, s, i, v, w, starts=starts, **common)
    # The table order is the models' own order, whatever order they were fitted in.
    fits = {name: fits[name] for name in MODELS if name in fits}
    comparison = comparison_table(fits)
    exact_ssr = EXACT_FIT_RTOL * float(np.sum((w * v) ** 2))
    ftests = f_test_table(fits, exact_ssr=exact_ssr)
    if "mixed" in fits and fits["mixed"].converged:
        ftests = pd.concat([ftests, _fixed_alpha_tests(fits, s, i, v, w, options, exact_ssr)],
                           ignore_index=True)
    verdict: Verdict = decide(comparison, ftests, options)
    data = pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v, "weight": w},
                        index=df.index)
    return MechanismFit(verdict.verdict, verdict.best, verdict.candidates, verdict.reason,
                        fits, comparison, ftests, data, weighting, options)
