"""IC50 → Ki by mechanism (Cheng–Prusoff), and Ki → the IC50 it predicts.

:func:`cheng_prusoff` turns an IC50 measured at substrate concentration S into the
inhibition constant of the assumed mechanism, from the mixed-inhibition relation
IC50 = (Km + S)/(Km/Kic + S/Kiu) (Cheng & Prusoff 1973; Cortés et al. 2001):


==============  =============================  ===========================
mechanism       Ki returned                    relation
==============  =============================  ===========================
competitive     Kic                            Ki = IC50 / (1 + S/Km)
uncompetitive   Kiu                            Ki = IC50 / (1 + Km/S)
noncompetitive  Ki (= Kic = Kiu)               Ki = IC50
mixed           Kic (Kiu = alpha·Kic)          Kic = IC50·(Km + S/alpha)/(Km + S)

Errors propagate by the delta method on the log scale, IC50 and Km independent, S and
alpha exact: var(ln Ki) = (se_IC50/IC50)² + (∂ln Ki/∂ln Km)²·(se_Km/Km)²; the interval
is Ki·exp(±z·se(ln Ki)).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from ..core.models import INHIBITION_MODELS, MODELS
from ..errors import DataError, Problem
from ..validate import numeric_column

__all__ = ["CONVERSIONS", "cheng_prusoff", "ic50_from_ki", "conversion_ratios"]

# The two constants of the mixed relation above. Every law of core.models converts by
# it: a constant that stands for Kic (its own name, or a tie such as noncompetitive's
# ki = kic = kiu) enters as Kic, one that stands for Kiu as Kiu, and a constant the law
# lacks is infinite (the law is the mixed law with that constant sent to infinity).
_MIXED_CONSTANTS = ("kic", "kiu")


def conversion_ratios(law):
    """(the constant Ki is reported as, Kic/Ki, Kiu/Ki) for ``law``, each ratio 1, None
    (alpha: a derived ratio of the law's own constants) or inf; None when the law's
    constants are not those of the mixed relation."""
    constants = law.inhibition_constants
    if not constants or any(not set(law.stands_for(c)) <= set(_MIXED_CONSTANTS)
                            for c in constants):
        return None
    reported = constants[0]
    ratios = []
    for target in _MIXED_CONSTANTS:
        if target in law.stands_for(reported):
            ratios.append(1.0)
        elif any(d.denominator == reported and target in law.stands_for(d.numerator)
                 for d in law.derived):
            ratios.append(None)
        else:
            ratios.append(np.inf)
    return reported, *ratios


#: The constant an IC50 converts to, and its Kic and Kiu ratios, for every law that has
#: one (read from :data:`~inhibkin.core.models.MODELS`).
_CONVERTIBLE = {name: ratios for name in INHIBITION_MODELS
                if (ratios := conversion_ratios(MODELS[name])) is not None}
#: Mechanisms an IC50 can be converted under.
CONVERSIONS = tuple(_CONVERTIBLE)
# Mechanisms whose conversion needs alpha = Kiu/Kic.
_NEEDS_ALPHA = tuple(n for n, (_, kic, kiu) in _CONVERTIBLE.items() if None in (kic, kiu))
# Mechanisms with a constant that acts through Kiu alone (on the enzyme–substrate
# complex, absent at S = 0): no IC50 at S = 0.
_NEEDS_SUBSTRATE = tuple(n for n in CONVERSIONS
                         if any(MODELS[n].stands_for(c) == ("kiu",)
                                for c in MODELS[n].inhibition_constants))


def as_array(value, name, problems, index, *, positive, allow_nan=False):
    """``value`` broadcast over ``index`` as a checked float array; every bad entry is
    appended to ``problems`` (shared with :mod:`inhibkin.potency.morrison`)."""
    frame = pd.DataFrame({name: np.broadcast_to(np.asarray(value, dtype=object),
                                                (len(index),))}, index=index)
    arr = numeric_column(frame, name, problems, allow_nan=allow_nan)
    if positive:
        labels = frame.index.to_numpy()
        zero = np.isfinite(arr) & (arr == 0)
        for row in labels[zero][:5]:
            problems.append(Problem(name, row, 0.0, f"{name} must be > 0"))
    return arr


def _log_factor(s, km, mechanism, alpha):
    """ln(Ki/IC50) and its derivative in ln Km, per element: Ki/IC50 =
    (Km/rc + S/ru)/(Km + S) with rc = Kic/Ki and ru = Kiu/Ki of the mechanism."""
    log_f = np.full(s.shape, np.nan)
    d_log_km = np.full(s.shape, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        for name, (_, kic_ratio, kiu_ratio) in _CONVERTIBLE.items():
            here = mechanism == name
            if not here.any():
                continue
            rc = alpha[here] if kic_ratio is None else kic_ratio
            ru = alpha[here] if kiu_ratio is None else kiu_ratio
            km_here, s_here = km[here], s[here]
            through_kic, through_kiu = km_here / rc, s_here / ru
            log_f[here] = np.log((through_kic + through_kiu) / (km_here + s_here))
            d_log_km[here] = (through_kic / (through_kic + through_kiu)
                              - km_here / (km_here + s_here))
    return log_f, d_log_km


def _conversion_inputs(value, s, km, mechanism, alpha, value_name):
    """Validated, broadcast float arrays, the mechanism array and the output index."""
    index = None
    for candidate in (value, s, km):
        if isinstance(candidate, pd.Series):
            index = candidate.index
            break
    shape = np.broadcast_shapes(np.shape(value), np.shape(s), np.shape(km),
                                np.shape(mechanism) if not isinstance(mechanism, str) else (),
                                np.shape(alpha) if alpha is not None else ())
    if len(shape) > 1:
        raise DataError(Problem(value_name, None, shape, "inputs must be scalars or 1-d"))
    n = shape[0] if shape else 1
    rows = index if index is not None and len(index) == n else pd.RangeIndex(n)
    problems: list[Problem] = []

    def plain(v):
        return v.to_numpy() if isinstance(v, pd.Series) else v

    values = as_array(plain(value), value_name, problems, rows, positive=True, allow_nan=True)
    s_arr = as_array(plain(s), "s", problems, rows, positive=False)
    km_arr = as_array(plain(km), "km", problems, rows, positive=True)
    mech = np.broadcast_to(np.asarray(plain(mechanism), dtype=object), (n,))
    labels = rows.to_numpy()
    unknown = ~np.isin(mech, CONVERSIONS)
    for row, m in list(zip(labels[unknown], mech[unknown]))[:5]:
        problems.append(Problem("mechanism", row, m,
                                f"unknown mechanism; IC50 converts under {CONVERSIONS}"))
    alpha_arr = np.full(n, np.nan)
    mixed = np.isin(mech, _NEEDS_ALPHA)
    if mixed.any():
        if alpha is None:
            problems.append(Problem("alpha", None, None,
                                    "the mixed conversion needs alpha = Kiu/Kic"))
        else:
            alpha_arr = as_array(plain(alpha), "alpha", problems, rows, positive=True,
                                  allow_nan=True)
            missing = mixed & ~np.isfinite(alpha_arr)
            for row in labels[missing][:5]:
                problems.append(Problem("alpha", row, np.nan,
                                        "the mixed conversion needs alpha = Kiu/Kic"))
    needs_s = np.isin(mech, _NEEDS_SUBSTRATE) & np.isfinite(s_arr) & (s_arr == 0)
    for row in labels[needs_s][:5]:
        problems.append(Problem("s", row, 0.0, "an uncompetitive or mixed inhibitor has no "
                                               "IC50 at S = 0; s must be > 0"))
    if problems:
        raise DataError(problems)
    scalar = not shape and index is None
    return values, s_arr, km_arr, mech, alpha_arr, rows, scalar, index is not None


def _shaped(values, rows, scalar, is_series, name):
    if scalar:
        return float(values[0])
    if is_series:
        return pd.Series(values, index=rows, name=name)
    return values


def cheng_prusoff(ic50, s, km, mechanism="competitive", alpha=None, *, ic50_se=None,
                  km_se=None, level=0.95):
    """Ki from IC50 by mechanism (Cheng & Prusoff 1973; Cortés et al. 2001).

    Parameters
    ----------
    ic50 : float, array_like or pandas.Series
        IC50 (> 0, inhibitor's unit; NaN passes through as NaN).
    s : float or array_like
        Substrate concentration of the IC50 assay (substrate's unit, ≥ 0; > 0 for
        uncompetitive and mixed).
    km : float or array_like
        Michaelis constant (substrate's unit, > 0).
    mechanism : str or array_like of str
        One of :data:`CONVERSIONS`, per element if an array.
    alpha : float or array_like, optional
        Kiu/Kic, required where the mechanism is ``"mixed"``.
    ic50_se, km_se : float or array_like, optional
        Standard errors (natural scale) to propagate.
    level : float
        Level of the interval returned with errors.

    Returns
    -------
    float, numpy.ndarray, pandas.Series or pandas.DataFrame
        Without errors: Ki (Kic for competitive and mixed, Kiu for uncompetitive, Ki for
        noncompetitive), shaped like the input (a Series keeps its index). With
        ``ic50_se`` or ``km_se``: a DataFrame with columns ki, ki_se, ki_low, ki_high
        (delta method on the log scale; see the module docstring).

    Examples
    --------
    >>> cheng_prusoff(3.0, 20.0, 10.0)
    1.0
    >>> cheng_prusoff(2.0, 20.0, 10.0, mechanism="mixed", alpha=4.0)
    1.0
    """
    values, s_arr, km_arr, mech, alpha_arr, rows, scalar, is_series = _conversion_inputs(
        ic50, s, km, mechanism, alpha, "ic50")
    log_f, d_log_km = _log_factor(s_arr, km_arr, mech, alpha_arr)
    ki = values * np.exp(log_f)
    if ic50_se is None and km_se is None:
        return _shaped(ki, rows, scalar, is_series, "ki")
    problems: list[Problem] = []
    se_ic50 = (np.zeros(len(rows)) if ic50_se is None else
               as_array(ic50_se.to_numpy() if isinstance(ic50_se, pd.Series) else ic50_se,
                         "ic50_se", problems, rows, positive=False, allow_nan=True))
    se_km = (np.zeros(len(rows)) if km_se is None else
             as_array(km_se.to_numpy() if isinstance(km_se, pd.Series) else km_se, "km_se",
                       problems, rows, positive=False))
    if problems:
        raise DataError(problems)
    se_log = np.sqrt((se_ic50 / values) ** 2 + (d_log_km * se_km / km_arr) ** 2)
    z = stats.norm.ppf(0.5 + level / 2)
    return pd.DataFrame({"ki": ki, "ki_se": ki * se_log, "ki_low": ki * np.exp(-z * se_log),
                         "ki_high": ki * np.exp(z * se_log)}, index=rows)


def ic50_from_ki(ki, s, km, mechanism="competitive", alpha=None):
    """IC50 expected at substrate concentration S from Ki: the inverse of
    :func:`cheng_prusoff`.

    Parameters
    ----------
    ki : float, array_like or pandas.Series
        Kic (competitive, mixed), Kiu (uncompetitive) or Ki (noncompetitive), > 0.
    s, km, mechanism, alpha
        As for :func:`cheng_prusoff`.

    Returns
    -------
    float, numpy.ndarray or pandas.Series
        IC50 in the unit of ``ki``.

    Examples
    --------
    >>> ic50_from_ki(1.0, 20.0, 10.0, mechanism="uncompetitive")
    1.5
    """
    values, s_arr, km_arr, mech, alpha_arr, rows, scalar, is_series = _conversion_inputs(
        ki, s, km, mechanism, alpha, "ki")
    log_f, _ = _log_factor(s_arr, km_arr, mech, alpha_arr)
    return _shaped(values * np.exp(-log_f), rows, scalar, is_series, "ic50")
