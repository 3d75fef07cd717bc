"""One compound's fits: each rate law fitted globally to all points, with lmfit.

Every positive constant is fitted as its natural logarithm, inside wide bounds
(:func:`inhibkin.core.starts.log_bounds`), with the analytic Jacobian of the model. All
inhibitor levels are fitted at once with shared vmax and km; replicates stay separate
points.

Intervals
---------
``intervals="profile"`` (the default) gives profile-likelihood intervals: for each
parameter the set of values whose re-optimised weighted SSR stays below
SSR_min·(1 + F(level; 1, n−k)/(n−k)), the F-based likelihood-ratio interval of
nonlinear least squares (Bates & Watts 1988, §6.1). They are asymmetric wherever the
likelihood is, and open-ended (``inf``) where the data set no upper limit.
``intervals="wald"`` gives the faster log-scale Wald interval exp(log p ± t·se(log p)),
asymmetric on the natural scale but symmetric in log. Standard errors are always the
delta-method ones, p·se(log p), from the covariance at the optimum scaled by the
residual variance.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import lmfit
import numpy as np
import pandas as pd
from scipy import stats

from ..core.compare import information_criteria
from ..core.determined import DETERMINATION_FACTOR, determined_flags
from ..core.models import MODELS, ratio_tie
from ..core.options import INTERVAL_METHODS
from ..core.profile import profile_crossing, profile_tie
from ..core.readonly import readonly_array, readonly_frame
from ..core.starts import log_bounds, starting_values
from ..display.text import MISSING, format_estimate
from ..errors import FitError

__all__ = ["ModelFit", "fit_model", "fit_michaelis_menten", "fixed_alpha_ssr",
           "INTERVAL_METHODS"]

# Convergence tolerances of MINPACK's LM (relative); tight enough that the estimates
# are settled to well beyond the 6 significant digits the reference checks ask for.
_TOL = 1e-12
_MAX_FUNCTION_EVALUATIONS = 2000
# Profile refits only need the SSR to locate a crossing: looser and capped, because a
# refit far out on a flat profile otherwise crawls along the bounds.
_PROFILE_TOL = 1e-9
_PROFILE_MAX_EVALUATIONS = 200
# Profile search: first step in log units when no standard error is available, the
# number of doublings of the step before the limit is declared open, and the
# precision of the limit (log units; 1e-5 is 0.001 % of the value).
_PROFILE_FIRST_STEP = 0.25
_PROFILE_MAX_DOUBLINGS = 20
_PROFILE_XTOL = 1e-5


@dataclass(frozen=True)
class ModelFit:
    """The least-squares fit of one rate law to one compound's points.

    Attributes
    ----------
    model : str
        Rate-law name (see :data:`inhibkin.core.models.MODELS`).
    params : pandas.DataFrame
        Indexed by parameter: ``estimate``, ``se`` (delta-method standard error),
        ``ci_low``, ``ci_high`` (interval at ``level``), ``determined`` (False for a
        constant past the tested range, at a bound or with an open interval).
        Units: those of the input columns.
    n_obs, n_params : int
    ssr : float
        Weighted residual sum of squares, sum((w*(v - fitted))**2).
    loglik, aic, aicc, bic : float
        Gaussian log-likelihood (variance profiled out) and criteria.
    converged : bool
    message : str
        The optimiser's message, or why the fit was not usable.
    fitted, residuals : numpy.ndarray
        Fitted rates and unweighted residuals v − fitted, in input order.
    level : float
        Confidence level of the intervals.
    interval_method : str
        ``"profile"`` or ``"wald"``.
    log_covariance : numpy.ndarray or None
        Covariance of the log-parameters at the optimum (None when singular).
    """

    model: str
    params: pd.DataFrame
    n_obs: int
    n_params: int
    ssr: float
    loglik: float
    aic: float
    aicc: float
    bic: float
    converged: bool
    message: str
    fitted: np.ndarray = field(repr=False)
    residuals: np.ndarray = field(repr=False)
    level: float = 0.95
    interval_method: str = "profile"
    log_covariance: np.ndarray | None = field(default=None, repr=False)

    def __post_init__(self):
        # Frozen all the way down: the tables and arrays inside cannot be edited either.
        object.__setattr__(self, "params", readonly_frame(self.params))
        for name in ("fitted", "residuals", "log_covariance"):
            object.__setattr__(self, name, readonly_array(getattr(self, name)))

    @property
    def best_values(self) -> dict[str, float]:
        """Parameter name to estimate."""
        return self.params["estimate"].to_dict()

    @property
    def dof(self) -> int:
        """Residual degrees of freedom, n_obs − n_params."""
        return self.n_obs - self.n_params

    def to_frame(self) -> pd.DataFrame:
        """The parameter table with the model name as a column (tidy)."""
        out = self.params.reset_index().rename(columns={"index": "parameter"})
        out.insert(0, "model", self.model)
        return out

    def summary(self) -> str:
        """A plain-text report of the fit."""
        head = (f"{self.model}: n = {self.n_obs}, k = {self.n_params}, SSR = {self.ssr:.6g}, "
                f"AICc = {self.aicc:.4g}, converged = {self.converged}")
        pct = f"{100 * self.level:g}%"
        lines = [head, f"  {'parameter':<10} {'estimate':>12} {'se':>12}  {pct} interval "
                       f"({self.interval_method})"]
        for name, row in self.params.iterrows():
            se, low, high = (MISSING if np.isnan(x) else f"{x:.4g}"
                             for x in (row["se"], row["ci_low"], row["ci_high"]))
            lines.append(f"  {name:<10} {format_estimate(row):>12} {se:>12}  [{low}, {high}]")
        if not self.converged:
            lines.append(f"  not converged: {self.message}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return (f"<p><b>{self.model}</b> — n = {self.n_obs}, SSR = {self.ssr:.4g}, "
                f"AICc = {self.aicc:.4g}</p>" + self.params.to_html(float_format="{:.4g}".format))


@dataclass(frozen=True)
class _Problem:
    """Data and layout of one least-squares problem in log-parameter space."""

    model: str
    s: np.ndarray
    i: np.ndarray
    v: np.ndarray
    w: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    held: tuple = ()

    def residual(self, theta):
        law = MODELS[self.model]
        return self.w * (self.v - law.rate(self.s, self.i, *np.exp(theta)))

    def jacobian(self, theta):
        """d residual / d theta for theta = log(params)."""
        law = MODELS[self.model]
        p = np.exp(theta)
        return -self.w[:, None] * law.jacobian(self.s, self.i, *p) * p[None, :]


def _make_problem(model, s, i, v, w, enzyme=None, fit_enzyme=False) -> _Problem:
    """The problem of ``model``; with ``enzyme`` given, a tight-binding law's [E] is held
    there (its log is the only value between its bounds), unless ``fit_enzyme``."""
    bounds = log_bounds(model, s, i, v)
    law = MODELS[model]
    lower = np.array([bounds[n][0] for n in law.param_names])
    upper = np.array([bounds[n][1] for n in law.param_names])
    held = ()
    if enzyme is not None and not fit_enzyme and "enzyme" in law.roles:
        j = law.roles.index("enzyme")
        lower[j] = upper[j] = np.log(enzyme)
        held = (j,)
    return _Problem(model, s, i, v, w, lower, upper, held)


def _solve(problem: _Problem, theta0, tie_matrix=None, offset=None, *, tol=_TOL,
           max_evaluations=_MAX_FUNCTION_EVALUATIONS):
    """Minimise the weighted SSR over phi where theta = tie_matrix @ phi + offset.

    The plain fit uses the identity (phi = theta); a profile step drops one column
    (that parameter fixed at ``offset``), and the profile of a ratio ties two
    log-parameters with a fixed difference. Returns (theta, ssr, log-covariance of
    theta or None, success, message).
    """
    k = len(theta0)
    A = np.eye(k) if tie_matrix is None else tie_matrix.copy()
    b = np.zeros(k) if offset is None else offset.copy()
    for j in problem.held:
        # A held constant moves with no free variable: its row goes, and any column
        # left empty by that.
        A[j] = 0.0
        b[j] = problem.lower[j]
        A = A[:, np.any(A != 0, axis=0)]
    # Bounds of a free variable: those of the first parameter it sets.
    owner = [int(np.flatnonzero(A[:, m])[0]) for m in range(A.shape[1])]
    phi0 = np.linalg.lstsq(A, np.asarray(theta0) - b, rcond=None)[0]
    params = lmfit.Parameters()
    for m, j in enumerate(owner):
        lo, hi = problem.lower[j] - b[j], problem.upper[j] - b[j]
        params.add(f"p{m}", value=float(np.clip(phi0[m], lo + 1e-9, hi - 1e-9)), min=lo, max=hi)

    def phi_of(pars):
        return np.array([pars[f"p{m}"].value for m in range(len(owner))])

    def residual(pars):
        return problem.residual(A @ phi_of(pars) + b)

    def jacobian(pars):
        return problem.jacobian(A @ phi_of(pars) + b) @ A

    minimizer = lmfit.Minimizer(residual, params, nan_policy="raise")
    with np.errstate(all="ignore"):
        try:
            result = minimizer.leastsq(Dfun=jacobian, col_deriv=0, ftol=tol, xtol=tol,
                                       max_nfev=max_evaluations)
        except ValueError as err:
            # lmfit refuses a residual that turned NaN (an overflow far out on the
            # bounds); that start failed, the others may not.
            theta = A @ phi0 + b
            return theta, np.inf, None, False, f"the rate law gave NaN ({err})"[:200]
    phi = phi_of(result.params)
    theta = A @ phi + b
    ssr = float(np.sum(problem.residual(theta) ** 2))
    covariance = None
    if result.covar is not None and A.shape[1] == k - len(problem.held):
        covariance = A @ np.asarray(result.covar) @ A.T
    success = bool(result.success) and np.isfinite(ssr)
    return theta, ssr, covariance, success, str(result.message)


def _profile_limit(problem, theta_hat, ssr_target, j, direction, first_step, contrast=None):
    """Where the profile SSR of theta_j (or of a contrast) crosses ``ssr_target``.

    Returns the limit in log units, or ±inf when the profile never reaches the target
    before the bounds (the data set no limit on that side).
    """
    k = len(theta_hat)
    A, fixed, centre, limit = profile_tie(theta_hat, problem.lower, problem.upper, direction,
                                          j, contrast)

    def offset(c):
        b = np.zeros(k)
        b[fixed] = c
        return b

    def excess(c, warm_theta):
        theta, ssr, _, _, _ = _solve(problem, warm_theta, A, offset(c), tol=_PROFILE_TOL,
                                     max_evaluations=_PROFILE_MAX_EVALUATIONS)
        return ssr - ssr_target, theta

    return profile_crossing(excess, centre, limit, direction, first_step, theta_hat,
                            xtol=_PROFILE_XTOL, max_doublings=_PROFILE_MAX_DOUBLINGS)


def _exp(x):
    """exp that saturates to 0 or inf instead of warning (limits of open intervals)."""
    with np.errstate(over="ignore"):
        return np.exp(x)


def _intervals(problem, theta_hat, ssr, se_log, method, level, dof):
    """Lower and upper limits (natural scale) for every parameter."""
    k = len(theta_hat)
    if method == "wald" or dof <= 0:
        t = stats.t.ppf(0.5 + level / 2, max(dof, 1))
        return _exp(theta_hat - t * se_log), _exp(theta_hat + t * se_log)
    target = ssr * (1 + stats.f.ppf(level, 1, dof) / dof)
    low, high = np.empty(k), np.empty(k)
    for j in range(k):
        if j in problem.held:
            low[j] = high[j] = np.nan
            continue
        step = se_log[j] if np.isfinite(se_log[j]) and se_log[j] > 0 else _PROFILE_FIRST_STEP
        low[j] = _profile_limit(problem, theta_hat, target, j, -1, step)
        high[j] = _profile_limit(problem, theta_hat, target, j, +1, step)
    return np.exp(low), np.exp(high)


def _ratio_interval(problem, theta_hat, ssr, se_log_ratio, method, level, dof, a, b):
    """Limits of exp(theta_b − theta_a), e.g. alpha = kiu/kic."""
    centre = theta_hat[b] - theta_hat[a]
    if method == "wald" or dof <= 0:
        t = stats.t.ppf(0.5 + level / 2, max(dof, 1))
        return _exp(centre - t * se_log_ratio), _exp(centre + t * se_log_ratio)
    target = ssr * (1 + stats.f.ppf(level, 1, dof) / dof)
    step = se_log_ratio if np.isfinite(se_log_ratio) and se_log_ratio > 0 else \
        _PROFILE_FIRST_STEP
    low = _profile_limit(problem, theta_hat, target, None, -1, step, contrast=(a, b))
    high = _profile_limit(problem, theta_hat, target, None, +1, step, contrast=(a, b))
    return np.exp(low), np.exp(high)


def _failed_fit(model, n_obs, message, level, method) -> ModelFit:
    names = MODELS[model].param_names
    nan = np.full(len(names), np.nan)
    params = pd.DataFrame({"estimate": nan, "se": nan, "ci_low": nan, "ci_high": nan,
                           "determined": False}, index=pd.Index(names, name="parameter"))
    return ModelFit(model, params, n_obs, len(names), np.nan, np.nan, np.nan, np.nan, np.nan,
                    False, message, np.full(n_obs, np.nan), np.full(n_obs, np.nan), level,
                    method)


def fit_model(model, s, i, v, weights=None, *, starts=None, intervals="profile", level=0.95,
              determination_factor=DETERMINATION_FACTOR, enzyme=None,
              fit_enzyme=False) -> ModelFit:
    """Fit one rate law to one compound's points (inputs already validated).

    Parameters
    ----------
    model : str
        Rate-law name.
    s, i, v : numpy.ndarray
        Substrate and inhibitor concentrations and rates (any consistent units).
    weights : numpy.ndarray, optional
        Residual multipliers w = 1/σ (relative σ is enough: the scale is estimated).
    starts : list of dict, optional
        Starting points to try (the best final SSR wins); default: the automatic start.
    intervals : {"profile", "wald"}
        Interval method (see the module docstring).
    level : float
        Confidence level of the intervals.
    determination_factor : float
        An inhibition constant above this multiple of the largest inhibitor
        concentration (or km above this multiple of the largest substrate
        concentration) is reported as a bound, not determined; the whole rule is
        :func:`inhibkin.core.determined.determined_flags`.
    enzyme : float, optional
        The active enzyme concentration (inhibitor's unit): a tight-binding law's [E]
        is held there (not counted among the fitted parameters; reported with no
        standard error or interval, and as not determined, being given). Ignored by the
        other laws.
    fit_enzyme : bool
        With ``enzyme``: fit [E] instead (within its positive log bounds,
        :mod:`inhibkin.core.bounds`), ``enzyme`` its value in the automatic start; it is
        then counted, and reported with its interval, or as an upper limit when the data
        do not determine it.

    Returns
    -------
    ModelFit
        Non-convergence is recorded on the result (``converged=False``), not raised.
    """
    if intervals not in INTERVAL_METHODS:
        raise FitError(f"intervals must be one of {INTERVAL_METHODS}, got {intervals!r}")
    law = MODELS[model]
    n = len(v)
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    problem = _make_problem(model, s, i, v, w, enzyme, fit_enzyme)
    k = law.n_params
    n_free = k - len(problem.held)
    if n < n_free:
        return _failed_fit(model, n, f"{n} points cannot determine {n_free} parameters",
                           level, intervals)
    if starts is None:
        starts = [starting_values(model, s, i, v, w)]
        if enzyme is not None and "enzyme" in law.roles:
            starts = [{**starts[0], law.param_names[law.roles.index("enzyme")]: enzyme}]
    if problem.held:
        starts = [{**start, **{law.param_names[j]: enzyme for j in problem.held}}
                  for start in starts]
    best = None
    for start in starts:
        theta0 = np.log([start[p] for p in law.param_names])
        theta0 = np.clip(theta0, problem.lower + 1e-6, problem.upper - 1e-6)
        outcome = _solve(problem, theta0)
        if best is None or (outcome[3] and (not best[3] or outcome[1] < best[1])):
            best = outcome
    theta, ssr, covariance, success, message = best
    if not success:
        return _failed_fit(model, n, f"optimiser did not converge: {message}", level, intervals)
    dof = n - n_free
    with np.errstate(invalid="ignore"):
        se_log = np.sqrt(np.diag(covariance)) if covariance is not None else np.full(k, np.nan)
    estimate = np.exp(theta)
    ci_low, ci_high = _intervals(problem, theta, ssr, se_log, intervals, level, dof)
    flags = determined_flags(law, theta[None], problem.lower[None], problem.upper[None],
                             ci_low[None], ci_high[None], se_log[None], s[None], i[None],
                             np.ones((1, n), bool), factor=determination_factor)[0]
    determined = flags[:k]
    table = pd.DataFrame(
        {"estimate": estimate, "se": estimate * se_log, "ci_low": ci_low, "ci_high": ci_high,
         "determined": determined},
        index=pd.Index(law.param_names, name="parameter"),
    )
    for j in problem.held:
        # Given, not estimated: no standard error and no interval.
        table.iloc[j, table.columns.get_indexer(["se", "ci_low", "ci_high"])] = np.nan
    for d, both in zip(law.derived, flags[k:]):
        a, b = law.param_names.index(d.denominator), law.param_names.index(d.numerator)
        se_ratio = np.nan
        if covariance is not None:
            var = covariance[a, a] + covariance[b, b] - 2 * covariance[a, b]
            se_ratio = float(np.sqrt(var)) if var >= 0 else np.nan
        if both:
            lo, hi = _ratio_interval(problem, theta, ssr, se_ratio, intervals, level, dof, a, b)
        else:
            lo, hi = np.nan, np.nan  # a ratio with an undetermined term has no interval
        ratio = float(np.exp(theta[b] - theta[a]))
        table.loc[d.name] = [ratio, ratio * se_ratio, lo, hi, bool(both)]
    fitted = law.rate(s, i, *estimate)
    criteria = information_criteria(ssr, n, n_free, float(np.sum(np.log(w))))
    return ModelFit(model, table, n, n_free, ssr, criteria["loglik"], criteria["aic"],
                    criteria["aicc"], criteria["bic"], True, message, fitted, v - fitted,
                    level, intervals, covariance)


def fixed_alpha_ssr(s, i, v, weights, alpha, starts, model="mixed", enzyme=None,
                    fit_enzyme=False) -> float:
    """Weighted SSR of the mixed model (or a family's general law, ``model``) with
    alpha = kiu/kic held at ``alpha``.

    Every other parameter is re-optimised (kiu = alpha·kic) from each of ``starts``
    (dicts of the model's parameters); the best successful SSR is returned, NaN when none
    converged. This is the constrained fit behind the verdict's check that the data
    place alpha where a mechanism's name claims (:mod:`inhibkin.core.compare`, rule 4).
    With ``enzyme``, a tight-binding law's [E] is held there (fitted with
    ``fit_enzyme``), as :func:`fit_model` does.
    """
    problem = _make_problem(model, s, i, v, np.asarray(weights, dtype=float), enzyme,
                            fit_enzyme)
    names = MODELS[model].param_names
    tie, offset = ratio_tie(MODELS[model], alpha)  # alpha = kiu/kic
    best = np.nan
    for start in starts:
        theta0 = np.log([start[p] for p in names])
        theta0 = np.clip(theta0, problem.lower + 1e-6, problem.upper - 1e-6)
        _, ssr, _, success, _ = _solve(problem, theta0, tie, offset)
        if success and not ssr >= best:
            best = ssr
    return float(best)


def fit_michaelis_menten(s, v, weights=None, *, intervals="profile", level=0.95) -> ModelFit:
    """Fit v = vmax·S/(km + S) by nonlinear least squares.

    Parameters
    ----------
    s : array_like
        Substrate concentrations (any unit; km comes out in it).
    v : array_like
        Initial rates (any unit; vmax comes out in it).
    weights : array_like, optional
        Residual multipliers w = 1/σ_i (relative values suffice).
    intervals : {"profile", "wald"}
        Interval method; see :mod:`inhibkin.mechanism.one_model`.
    level : float
        Confidence level.

    Returns
    -------
    ModelFit
        ``.params`` has rows ``vmax`` and ``km``.

    Examples
    --------
    >>> import inhibkin as ik
    >>> fit = ik.fit_michaelis_menten([1, 2, 5, 10, 20], [3.3, 5.0, 7.1, 8.3, 9.1])
    >>> round(fit.best_values["km"], 1)
    2.0
    """
    from ..validate import check_michaelis_menten

    s, v, w = check_michaelis_menten(s, v, weights)
    fit = fit_model("none", s, np.zeros_like(s), v, w, intervals=intervals, level=level)
    if not fit.converged:
        raise FitError(f"the Michaelis–Menten fit did not converge: {fit.message}")
    return fit
