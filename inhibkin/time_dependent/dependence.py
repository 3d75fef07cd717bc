"""kobs against [I]: one-step or two-step, kinact, KI, kinact/KI, Ki* and residence time.

Each scheme of :data:`.schemes.SCHEMES` is fitted by weighted least squares
(:func:`scipy.optimize.least_squares`; weights 1/SE of each kobs, residual variance
estimated), positive constants on the log scale. The nested pair is compared as the
mechanism verdict compares its models: the extra sum-of-squares F-test of ``one_step``
against ``two_step`` decides (level ``alpha``), and AICc, BIC and Akaike weights are
reported beside it. Intervals are Wald intervals on the log scale (delta method) with
Student-t quantiles, so kinact/KI, whose logarithm is log kinact − log KI, gets its
interval from the covariance of the two (Copeland, *Evaluation of Enzyme Inhibitors in
Drug Discovery*, recommends kinact/KI as the ranking constant of covalent inhibitors).

Substrate correction. With a substrate-competitive inhibitor the hyperbola's midpoint is
KI,app = KI·(1 + S/Km): substrate in the active site keeps the inhibitor out of the first
complex. Given the assay's S and Km the reported KI (and Ki*) are divided, and kinact/KI
multiplied, by 1 + S/Km; without them the constants are the apparent ones.

Slow, tight reversible binding (two-step with k6 > 0): the overall constant is
Ki* = Ki·k6/(k5 + k6) and the residence time of the final complex 1/k6
(Copeland, as above). For the one-step scheme Ki = koff/kon and the residence time 1/koff.

The interval of the one-step Ki = koff/kon is Fieller's (Fieller 1954, J. R. Stat. Soc. B
16:175): kobs = koff + kon·[I] is linear in both constants, so the set of ratios r for
which koff − r·kon = 0 is not rejected by the t-test at ``level`` is exact under normal
kobs errors (it is the profile interval of the line) and, unlike a log-scale delta
interval, stays honest when koff is barely told from 0: its lower end is then 0, and when
kon itself is not told from 0 its upper end is infinite.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ..core.compare import akaike_weights, f_test, information_criteria
from .schemes import SCHEMES

__all__ = ["SchemeFit", "fit_scheme", "compare_schemes", "derived_constants", "unpack_theta",
           "free_names", "fieller_ratio"]


class SchemeFit(dict):
    """Plain record of one scheme's fit (estimates on the natural scale, covariance on
    the fitted scale); internal to :mod:`inhibkin.time_dependent`."""


def unpack_theta(scheme, theta, irreversible):
    """Natural parameters from the fitted vector: log for rates and KI, linear off-rate."""
    names = SCHEMES[scheme].params
    values = {}
    j = 0
    for name in names:
        if name == SCHEMES[scheme].off_rate:
            values[name] = 0.0 if irreversible else theta[j]
            j += 0 if irreversible else 1
        else:
            values[name] = float(np.exp(theta[j]))
            j += 1
    return values


def free_names(scheme, irreversible):
    """Names of the fitted-scale entries: ``log_<name>``, the off-rate itself (linear, ≥ 0)
    unless held at 0."""
    entry = SCHEMES[scheme]
    return tuple(("log_" + p if p != entry.off_rate else p) for p in entry.params
                 if not (irreversible and p == entry.off_rate))


def fit_scheme(scheme, inhibitor, kobs, kobs_se, *, irreversible=True):
    """Weighted least squares of one kobs-against-[I] scheme.

    Parameters
    ----------
    scheme : {"one_step", "two_step"}
    inhibitor, kobs, kobs_se : numpy.ndarray
        [I] (any unit), kobs and its standard error (per time unit).
    irreversible : bool
        Hold the scheme's off-rate (koff, k6) at zero.

    Returns
    -------
    SchemeFit
        ``values`` (dict), ``theta``, ``cov`` (fitted scale), ``ssr`` (weighted), ``n``,
        ``k``, ``dof``, ``converged``, ``free`` (names of the fitted-scale entries:
        ``log_<name>`` or the off-rate itself).
    """
    entry = SCHEMES[scheme]
    fn = entry.function
    w = 1.0 / kobs_se
    top = float(np.max(kobs))
    i_pos = inhibitor[inhibitor > 0]

    def unpack(theta):
        return unpack_theta(scheme, theta, irreversible)

    def residual(theta):
        v = unpack(theta)
        return w * (fn(inhibitor, *(v[p] for p in entry.params)) - kobs)

    free = free_names(scheme, irreversible)
    lower = [(0.0 if name == entry.off_rate else -np.inf) for name in free]
    starts = []
    if scheme == "one_step":
        slope = max(np.polyfit(inhibitor, kobs, 1)[0], top / max(i_pos.max(), 1e-300) * 1e-3)
        starts.append([np.log(slope)] + ([] if irreversible else [max(kobs.min(), 0.0)]))
    else:
        for ki in np.geomspace(i_pos.min() / 3, i_pos.max() * 3, 7):
            starts.append([np.log(top * 1.2), np.log(ki)]
                          + ([] if irreversible else [max(kobs.min(), 0.0) * 0.5]))
    best = None
    for x0 in starts:
        res = optimize.least_squares(residual, x0, bounds=(lower, np.inf), method="trf",
                                     xtol=1e-12, ftol=1e-12, gtol=1e-12)
        if best is None or res.cost < best.cost:
            best = res
    n, k = len(kobs), len(free)
    ssr = float(np.sum(best.fun ** 2))
    dof = n - k
    s2 = ssr / dof if dof > 0 else np.nan
    cov = s2 * np.linalg.pinv(best.jac.T @ best.jac)
    return SchemeFit(scheme=scheme, values=unpack(best.x), theta=best.x, cov=cov, ssr=ssr,
                     n=n, k=k, dof=dof, converged=bool(best.success), free=tuple(free),
                     sum_log_weights=float(np.sum(np.log(w))))


def compare_schemes(fits, *, alpha=0.05):
    """Comparison table, F-test and verdict of the nested pair.

    Returns
    -------
    comparison : pandas.DataFrame
        One row per scheme: n, k, ssr, aicc, bic, delta_aicc, akaike_weight, converged.
    ftest : dict
        f_value, p_value, df_num, df_den of one_step against two_step.
    verdict : str
        ``two_step`` when the F-test rejects ``one_step`` at ``alpha``, else ``one_step``.
    """
    rows = []
    for name, fit in fits.items():
        ic = information_criteria(fit["ssr"], fit["n"], fit["k"], fit["sum_log_weights"])
        rows.append({"scheme": name, "n": fit["n"], "k": fit["k"], "ssr": fit["ssr"],
                     "aicc": ic["aicc"], "bic": ic["bic"], "converged": fit["converged"]})
    table = pd.DataFrame(rows).set_index("scheme")
    table["delta_aicc"] = table["aicc"] - table["aicc"].min()
    table["akaike_weight"] = akaike_weights(table["aicc"].to_numpy())
    small, big = fits["one_step"], fits["two_step"]
    f_value, p_value, df_num, df_den = f_test(small["ssr"], small["dof"], big["ssr"],
                                              big["dof"])
    ftest = {"f_value": f_value, "p_value": p_value, "df_num": df_num, "df_den": df_den}
    verdict = "two_step" if np.isfinite(p_value) and p_value < alpha else "one_step"
    return table, ftest, verdict


def _interval(log_value, se, tq):
    return np.exp(log_value), np.exp(log_value - tq * se), np.exp(log_value + tq * se)


def derived_constants(fit, *, substrate=None, km=None, level=0.95):
    """The constants a chemist ranks by, with intervals (module notes).

    Parameters
    ----------
    fit : SchemeFit
    substrate, km : float, optional
        The assay's substrate concentration and Km (same unit) for the competitive
        correction 1 + S/Km; without them the apparent constants are reported.
    level : float

    Returns
    -------
    pandas.DataFrame
        Index: the constants; columns estimate, ci_low, ci_high, meaning.
    """
    factor = 1.0 + substrate / km if substrate is not None and km is not None else 1.0
    tq = stats.t.ppf(0.5 + level / 2, fit["dof"]) if fit["dof"] > 0 else np.nan
    theta, cov, free = fit["theta"], fit["cov"], fit["free"]
    pos = {name: j for j, name in enumerate(free)}
    rows = {}

    def log_row(name, grad, shift, meaning):
        g = np.zeros(len(theta))
        for key, coef in grad.items():
            g[pos[key]] = coef
        value = float(g @ theta) + shift
        se = float(np.sqrt(max(g @ cov @ g, 0.0)))
        est, low, high = _interval(value, se, tq)
        rows[name] = {"estimate": est, "ci_low": low, "ci_high": high, "meaning": meaning}

    log_factor = np.log(factor)
    corrected = "" if factor == 1.0 else f" (corrected by 1 + S/Km = {factor:.4g})"
    if fit["scheme"] == "two_step":
        log_row("k5", {"log_k5": 1}, 0.0, "kinact (irreversible) or k5, per time unit")
        log_row("ki_app", {"log_ki": 1}, 0.0, "KI at the assay's substrate, [I] unit")
        log_row("ki", {"log_ki": 1}, -log_factor, "KI" + corrected)
        log_row("k5_over_ki", {"log_k5": 1, "log_ki": -1}, log_factor,
                "kinact/KI (second-order, per [I] unit per time unit)" + corrected)
        if "k6" in pos:
            _reversible_rows(rows, fit, pos, tq, factor, corrected)
    else:
        log_row("kon", {"log_kon": 1}, log_factor,
                "association rate constant, per [I] unit per time unit" + corrected)
        if "koff" in pos:
            koff = fit["values"]["koff"]
            se = float(np.sqrt(max(cov[pos["koff"], pos["koff"]], 0.0)))
            low, high = max(koff - tq * se, 0.0), koff + tq * se
            rows["koff"] = {"estimate": koff, "ci_low": low, "ci_high": high,
                            "meaning": "dissociation rate constant, per time unit"}
            rows["residence_time"] = {
                "estimate": 1 / koff if koff > 0 else np.inf,
                "ci_low": 1 / high, "ci_high": 1 / low if low > 0 else np.inf,
                "meaning": "1/koff, time unit"}
            kon = fit["values"]["kon"]
            # (koff, kon) covariance from that of (koff, log kon): d kon = kon·d log kon.
            j = pos["log_kon"]
            v_ff, v_fk, v_kk = (cov[pos["koff"], pos["koff"]], kon * cov[pos["koff"], j],
                                kon ** 2 * cov[j, j])
            low, high = fieller_ratio(koff, kon, v_ff, v_fk, v_kk, tq)
            rows["ki"] = {"estimate": koff / kon / factor, "ci_low": low / factor,
                          "ci_high": high / factor,
                          "meaning": "Ki = koff/kon, [I] unit (Fieller interval)" + corrected}
    return pd.DataFrame.from_dict(rows, orient="index")


def fieller_ratio(a, b, v_aa, v_ab, v_bb, tq):
    """Fieller's interval of a/b from estimates a, b with covariance (v_aa, v_ab, v_bb).

    The r with (a − r·b)² ≤ tq²·(v_aa − 2r·v_ab + r²·v_bb); a ratio of non-negative
    constants, so the lower end is clipped at 0. When b is not told from 0 at this
    quantile (b² ≤ tq²·v_bb) the set is unbounded and the upper end is infinite.

    Returns
    -------
    (float, float)
        ci_low, ci_high (NaN, NaN when tq is not finite).
    """
    if not np.isfinite(tq):
        return np.nan, np.nan
    q = tq ** 2
    quad, half_lin, const = b * b - q * v_bb, a * b - q * v_ab, a * a - q * v_aa
    disc = half_lin ** 2 - quad * const
    if quad <= 0 or disc < 0:
        return 0.0, np.inf
    root = np.sqrt(disc)
    return max((half_lin - root) / quad, 0.0), (half_lin + root) / quad


def _reversible_rows(rows, fit, pos, tq, factor, corrected):
    """k6, residence time 1/k6 and Ki* = Ki·k6/(k5 + k6) (delta method on log Ki*)."""
    theta, cov = fit["theta"], fit["cov"]
    k5, ki, k6 = fit["values"]["k5"], fit["values"]["ki"], fit["values"]["k6"]
    se6 = float(np.sqrt(max(cov[pos["k6"], pos["k6"]], 0.0)))
    low6, high6 = max(k6 - tq * se6, 0.0), k6 + tq * se6
    rows["k6"] = {"estimate": k6, "ci_low": low6, "ci_high": high6,
                  "meaning": "reverse isomerisation rate constant, per time unit"}
    rows["residence_time"] = {"estimate": 1 / k6 if k6 > 0 else np.inf,
                              "ci_low": 1 / high6 if high6 > 0 else np.inf,
                              "ci_high": 1 / low6 if low6 > 0 else np.inf,
                              "meaning": "1/k6, time unit"}
    if k6 <= 0:
        rows["ki_star"] = {"estimate": 0.0, "ci_low": 0.0, "ci_high": np.nan,
                           "meaning": "Ki* = Ki·k6/(k5 + k6): k6 not told from 0"}
        return
    # d log Ki* / d(log k5, log KI, k6)
    grad = np.zeros(len(theta))
    grad[pos["log_k5"]] = -k5 / (k5 + k6)
    grad[pos["log_ki"]] = 1.0
    grad[pos["k6"]] = 1 / k6 - 1 / (k5 + k6)
    se = float(np.sqrt(max(grad @ cov @ grad, 0.0)))
    log_value = np.log(ki * k6 / (k5 + k6) / factor)
    est, low, high = _interval(log_value, se, tq)
    rows["ki_star"] = {"estimate": est, "ci_low": low, "ci_high": high,
                       "meaning": "Ki* = Ki·k6/(k5 + k6), overall constant" + corrected}
