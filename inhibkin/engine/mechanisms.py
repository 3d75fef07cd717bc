"""Every mechanism fitted to many compounds at once, compared and decided.

This is :func:`inhibkin.mechanism.fit.fit_mechanisms` (with ``intervals="wald"``) for a
whole campaign in stacked arrays: the same automatic starts, bounds and weighting rules,
the same multi-start rule for mixed, the same criteria, F-tests and verdict rules
(:mod:`inhibkin.core.compare`, vectorised here and checked against it by the tests). Fits the
engine cannot converge are refitted by the lmfit path and counted.

Two entry points:

- :func:`fit_mechanism_arrays` — padded (B, n) arrays in, a :class:`MechanismBatch` of
  arrays out (the fast path, used by the benchmark);
- :func:`fit_mechanisms_batch` — one table (or array set) per compound in, one
  :class:`inhibkin.mechanism.fit.MechanismFit` per compound out, interchangeable with the
  lmfit path's results.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from ..core.bounds import NESTED_FAR_FACTOR, classical_limit
from ..core.compare import (
    EDGE_SIDES,
    EXACT_FIT_RTOL,
    F_TEST_COLUMNS,
    Verdict,
    VerdictOptions,
    akaike_weights,
    decide_extended,
    decide_from,
    extension_signs,
    f_test_arrays,
    free_alpha,
    information_criteria,
)
from ..core.determined import DETERMINATION_FACTOR, determined_flags
from ..core.lack_of_fit import LACK_OF_FIT_ALPHA, lack_of_fit, residual_pattern
from ..core.models import (
    EXTENDED_MODELS,
    FAMILIES,
    MODEL_NAMES,
    MODELS,
    ONE_CONSTANT_MODELS,
    extension_of,
    nested_pairs,
    nested_start,
)
from ..core.options import FitOptions, check_fit_enzyme
from ..core.readonly import ReadOnlyFrame
from ..core.starts import extra_start
from ..core.weighting import (
    DEFAULT_WEIGHTING,
    REWEIGHT_ITERATIONS,
    SD_WEIGHTINGS,
    normalise_weights,
    rate_se_weights,
    relative_weights_from_fitted,
    resolve_weighting,
    weighting_label,
)
from ..errors import DataError, Problem
from ..mechanism.fit import (
    MechanismFit,
    enzyme_concentration,
    extended_starts,
    mixed_starts,
    molar_grid,
    needs_tight_binding,
    relative_weights,
    with_rate_flags,
)
from ..mechanism.one_model import ModelFit, fit_model, fixed_alpha_ssr
from ..validate import check_grid, grid_rule_problems
from . import lm
from .chunks import concat_batches, run_chunks
from .starts import mechanism_log_bounds, mechanism_starts

__all__ = ["ModelBatch", "MechanismBatch", "fit_mechanism_arrays", "fit_mechanisms_batch",
           "pad"]

# Starts are clipped this far inside the bounds (log units), as fit_model clips them.
_START_MARGIN = 1e-6
_MESSAGE_FALLBACK = "refitted by the lmfit path after the engine failed: "
# The rates stage's column of well flags, read as fit_mechanisms reads it.
RATE_FLAGS = "flags"


class _LogRateLaw:
    """A rate law as the solver wants it: prediction and Jacobian in log-parameters."""

    def __init__(self, name):
        self.law = MODELS[name]
        # Every rate law here is vmax times a function of the rest, so the prediction is
        # vmax·∂v/∂vmax = ∂v/∂log(vmax): the Jacobian gives it without a second pass.
        if self.law.param_names[0] != "vmax":
            raise ValueError(f"{name}: the engine expects vmax as the first parameter")

    def __call__(self, theta, s, i):
        # Batch-last: theta (k, b), s and i (n, b); d/d log p = p · d/d p.
        p = np.exp(theta)
        jac = np.moveaxis(self.law.jacobian(s, i, *p), -1, 0) * p[:, None, :]
        return jac[0], jac


class _FixedAlphaLaw:
    """Mixed (or a family's general law, ``name``) with alpha = kiu/kic held at ``value``:
    every log-parameter but kiu free, and log kiu = log kic + log value (the constrained
    fit of the verdict's rule 4)."""

    def __init__(self, value, name="mixed"):
        self.law = MODELS[name]
        self.kic = self.law.param_names.index("kic")
        self.kiu = self.law.param_names.index("kiu")
        self.log_value = np.log(value)

    def __call__(self, theta, s, i):
        full = np.insert(theta, self.kiu, theta[self.kic] + self.log_value, axis=0)
        p = np.exp(full)
        jac = np.moveaxis(self.law.jacobian(s, i, *p), -1, 0) * p[:, None, :]
        # d/d log kic moves kiu with it.
        reduced = np.delete(jac, self.kiu, axis=0)
        reduced[self.kic] += jac[self.kiu]
        return jac[0], reduced


@dataclass(frozen=True)
class ModelBatch:
    """One rate law fitted to every compound of a batch (rows: compounds).

    Attributes
    ----------
    model : str
    names : tuple of str
        Row labels of the parameter columns: the law's parameters, plus ``alpha``
        (= kiu/kic, derived) for mixed.
    estimate, se, ci_low, ci_high : numpy.ndarray, shape (B, len(names))
        As the columns of :attr:`inhibkin.mechanism.one_model.ModelFit.params` (Wald intervals at
        ``level``); NaN for a failed fit.
    determined : numpy.ndarray of bool, shape (B, len(names))
    theta : numpy.ndarray, shape (B, k)
        Natural logs of the estimates.
    log_covariance : numpy.ndarray, shape (B, k, k)
        Covariance of ``theta`` (NaN when singular or failed).
    ssr, loglik, aic, aicc, bic : numpy.ndarray, shape (B,)
    n_obs : numpy.ndarray of int, shape (B,)
    n_params : int
    converged : numpy.ndarray of bool
    status : numpy.ndarray of int8
        The engine's status code (:data:`inhibkin.engine.lm.STATUS_REASONS`).
    reason : numpy.ndarray of str
        The status in words (the lmfit message for refitted rows).
    iterations : numpy.ndarray of int
        Engine iterations (summed over the starts tried for mixed).
    fallback : numpy.ndarray of bool
        True where the lmfit path refitted this model for this compound.
    """

    model: str
    names: tuple[str, ...]
    estimate: np.ndarray
    se: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    determined: np.ndarray
    theta: np.ndarray
    log_covariance: np.ndarray = field(repr=False)
    ssr: np.ndarray = field(repr=False)
    loglik: np.ndarray = field(repr=False)
    aic: np.ndarray = field(repr=False)
    aicc: np.ndarray = field(repr=False)
    bic: np.ndarray = field(repr=False)
    n_obs: np.ndarray = field(repr=False)
    n_params: int = 0
    converged: np.ndarray = field(default=None, repr=False)
    status: np.ndarray = field(default=None, repr=False)
    reason: np.ndarray = field(default=None, repr=False)
    iterations: np.ndarray = field(default=None, repr=False)
    fallback: np.ndarray = field(default=None, repr=False)

    #: Fields with one row per compound (concatenated across chunks).
    batch_fields = ("estimate", "se", "ci_low", "ci_high", "determined", "theta",
                    "log_covariance", "ssr", "loglik", "aic", "aicc", "bic", "n_obs",
                    "converged", "status", "reason", "iterations", "fallback")

    def to_frame(self) -> pd.DataFrame:
        """Tidy table: one row per compound and parameter."""
        b, m = self.estimate.shape
        return pd.DataFrame({
            "compound": np.repeat(np.arange(b), m),
            "model": self.model,
            "parameter": np.tile(self.names, b),
            "estimate": self.estimate.ravel(), "se": self.se.ravel(),
            "ci_low": self.ci_low.ravel(), "ci_high": self.ci_high.ravel(),
            "determined": self.determined.ravel(),
            "converged": np.repeat(self.converged, m),
        })


@dataclass(frozen=True)
class MechanismBatch:
    """Every mechanism fitted to every compound of a batch, and the verdicts.

    Attributes
    ----------
    models : dict of str to ModelBatch
    verdict, best, reason : numpy.ndarray of object, shape (B,)
        As :class:`inhibkin.core.compare.Verdict` (``best`` is None for ``failed``).
    candidates : numpy.ndarray of object, shape (B,)
        Tuples of model names.
    p_values : dict of (str, str) to numpy.ndarray
        F-test p-value of every nested (reduced, full) pair.
    s, i, v, mask, weights : numpy.ndarray, shape (B, n)
        The padded data and the residual multipliers used.
    valid : numpy.ndarray of bool, shape (B,)
        False for compounds whose data could not be fitted (the reason says why).
    weight_fallback : numpy.ndarray of bool, shape (B,)
        True where the lmfit path set the ``relative`` weights.
    weighting : str
    options : VerdictOptions
    level : float
    lack_of_fit : pandas.DataFrame
        One row per (compound, model) tested: compound, model, method, statistic,
        p_value (rule 5 of :mod:`inhibkin.core.compare`). Extended laws appear in
        :attr:`models` with results only for the compounds that tried them.
    """

    models: dict
    verdict: np.ndarray
    best: np.ndarray
    candidates: np.ndarray
    reason: np.ndarray
    p_values: dict = field(repr=False)
    s: np.ndarray = field(repr=False)
    i: np.ndarray = field(repr=False)
    v: np.ndarray = field(repr=False)
    mask: np.ndarray = field(repr=False)
    weights: np.ndarray = field(repr=False)
    valid: np.ndarray = field(repr=False)
    weight_fallback: np.ndarray = field(repr=False)
    weighting: str = DEFAULT_WEIGHTING
    options: VerdictOptions = VerdictOptions()
    level: float = 0.95
    lack_of_fit: pd.DataFrame = field(default=None, repr=False)

    batch_fields = ("verdict", "best", "candidates", "reason", "s", "i", "v", "mask",
                    "weights", "valid", "weight_fallback")

    def __len__(self) -> int:
        return len(self.verdict)

    @property
    def n_fallback(self) -> int:
        """Model fits refitted by the lmfit path (plus relative-weight fallbacks)."""
        return int(sum(m.fallback.sum() for m in self.models.values())
                   + self.weight_fallback.sum())

    def to_frame(self) -> pd.DataFrame:
        """One row per compound: verdict, best model, reason, and AICc of every model."""
        out = pd.DataFrame({"verdict": self.verdict, "best": self.best,
                            "candidates": [", ".join(c) for c in self.candidates],
                            "reason": self.reason})
        for name, m in self.models.items():
            out[f"aicc_{name}"] = m.aicc
        out.index.name = "compound"
        return out

    def summary(self) -> str:
        """Counts of verdicts, failures and fallbacks."""
        counts = pd.Series(self.verdict).value_counts()
        lines = [f"{len(self)} compounds, {self.weighting} weighting; "
                 f"{self.n_fallback} fits refitted by the lmfit path"]
        lines += [f"  {name:<15} {count}" for name, count in counts.items()]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return f"<pre>{self.summary()}</pre>"

    def models_tried(self) -> list[set]:
        """The extended laws each compound tried (those its lack-of-fit table names)."""
        tried = [set() for _ in range(len(self))]
        if self.lack_of_fit is not None:
            for c, model in zip(self.lack_of_fit["compound"], self.lack_of_fit["model"]):
                tried[c].add(model)
        return tried

    def shown_models(self, c, tried=None) -> list[str]:
        """The models :meth:`mechanism_fit` of compound ``c`` holds: every classical law,
        and the extended laws it tried or converged (``tried``: its entry of
        :meth:`models_tried`)."""
        if tried is None:
            tried = self.models_tried()[c]
        return [name for name, m in self.models.items()
                if MODELS[name].family == "classical" or name in tried or m.converged[c]]

    def to_mechanism_fits(self, *, data_index=None) -> list[MechanismFit]:
        """One :class:`~inhibkin.mechanism.fit.MechanismFit` per compound.

        Parameters
        ----------
        data_index : sequence of pandas.Index, optional
            Row labels of each compound's points (default 0..n−1).
        """
        return [self.mechanism_fit(c, None if data_index is None else data_index[c])
                for c in range(len(self))]

    @functools.cached_property
    def _lack_of_fit_split(self):
        """The lack-of-fit table without its compound column, the row order that groups
        it by compound and each compound's edges in that order (split once: a campaign
        builds its compounds' fits one at a time, and filtering the whole table for each
        cost more than the rest of the fit)."""
        lack = _LACK_COLUMNS if self.lack_of_fit is None else self.lack_of_fit
        compound = lack["compound"].to_numpy(dtype=np.int64)
        order = np.argsort(compound, kind="stable")
        edges = np.searchsorted(compound[order], np.arange(len(self) + 1))
        return lack.drop(columns="compound"), order, edges

    def mechanism_fit(self, c, labels=None) -> MechanismFit:
        """The :class:`~inhibkin.mechanism.fit.MechanismFit` of compound ``c`` (row
        labels of its points ``labels``, default 0..n−1), built from the arrays."""
        keep = self.mask[c]
        s, i, v, w = self.s[c][keep], self.i[c][keep], self.v[c][keep], self.weights[c][keep]
        table, order, edges = self._lack_of_fit_split
        lack = table.iloc[order[edges[c]:edges[c + 1]]].reset_index(drop=True)
        models = {name: self.models[name] for name in self.shown_models(c, set(lack["model"]))}
        fits = {name: _model_fit(m, c, s, i, v, self.level) for name, m in models.items()}
        comparison = _comparison_frame(models, c)
        ftests = _ftest_frame(models, self.p_values, c)
        data = ReadOnlyFrame({"substrate": s, "inhibitor": i, "rate": v, "weight": w},
                             index=labels)
        return MechanismFit(self.verdict[c], self.best[c], self.candidates[c], self.reason[c],
                            fits, comparison, ftests, data, self.weighting, self.options,
                            lack)


_LACK_COLUMNS = pd.DataFrame(columns=["compound", "model", "method", "statistic", "p_value"])


@functools.lru_cache(maxsize=256)
def _labels(names: tuple, name: str) -> pd.Index:
    """One Index per tuple of labels, shared by every compound's table (an Index is
    immutable; building a string Index costs about as much as the table's numbers)."""
    return pd.Index(names, name=name)


def _model_fit(m: ModelBatch, c, s, i, v, level) -> ModelFit:
    """The ModelFit of compound ``c`` from the arrays (what fit_model would return)."""
    # Built read-only (ModelFit keeps it as it is): a second construction per table cost
    # about as much as the first.
    params = ReadOnlyFrame({"estimate": m.estimate[c], "se": m.se[c], "ci_low": m.ci_low[c],
                           "ci_high": m.ci_high[c], "determined": m.determined[c]},
                          index=_labels(tuple(m.names), "parameter"))
    k = MODELS[m.model].n_params
    n = len(v)
    if m.converged[c]:
        fitted = MODELS[m.model].rate(s, i, *m.estimate[c, :k])
        residuals = v - fitted
        cov = m.log_covariance[c]
        cov = None if np.isnan(cov).all() else cov.copy()
    else:
        fitted = residuals = np.full(n, np.nan)
        cov = None
    return ModelFit(m.model, params, n, m.n_params, float(m.ssr[c]), float(m.loglik[c]),
                    float(m.aic[c]), float(m.aicc[c]), float(m.bic[c]), bool(m.converged[c]),
                    str(m.reason[c]), fitted, residuals, level, "wald", cov)


def _comparison_frame(models, c) -> pd.DataFrame:
    """:func:`inhibkin.core.compare.comparison_table` for compound ``c``, built from arrays."""
    names = list(models)
    conv = np.array([models[n].converged[c] for n in names])

    def column(attr):
        values = np.array([getattr(models[n], attr)[c] for n in names], dtype=float)
        return np.where(conv, values, np.nan)

    aicc = column("aicc")
    finite = np.isfinite(aicc)
    delta = aicc - np.nanmin(aicc) if finite.any() else np.full(len(names), np.nan)
    weight = akaike_weights(aicc)
    return ReadOnlyFrame({
        "n_obs": [int(models[n].n_obs[c]) for n in names],
        "n_params": [models[n].n_params for n in names],
        "ssr": column("ssr"), "aic": column("aic"), "aicc": aicc, "bic": column("bic"),
        "delta_aicc": delta, "akaike_weight": weight, "converged": conv,
    }, index=_labels(tuple(names), "model"))


def _ftest_frame(models, p_values, c) -> pd.DataFrame:
    """:func:`inhibkin.core.compare.f_test_table` for compound ``c``, built from arrays."""
    rows = []
    for (small, large), (f_value, p_value) in p_values.items():
        if large not in models or (small in MODELS and small not in models):
            continue  # an extended law this compound did not try
        b = models[large]
        n = int(b.n_obs[c])
        # A fixed-alpha row has one parameter fewer than mixed.
        k_small = models[small].n_params if small in models else b.n_params - 1
        held = small not in MODELS and bool(b.converged[c])
        rows.append({"reduced": small, "full": large, "f_value": float(f_value[c]),
                     "df_num": b.n_params - k_small, "df_den": n - b.n_params,
                     "p_value": float(p_value[c]),
                     "free_alpha": _free_alpha(b.theta[c], large) if held else np.nan})
    return ReadOnlyFrame(rows, columns=F_TEST_COLUMNS)


def _free_alpha(theta, law) -> float:
    """alpha = kiu/kic of ``law`` (mixed or a family's general law) from its log
    parameters ``theta`` (one compound): :func:`inhibkin.core.compare.free_alpha`."""
    names = MODELS[law].param_names
    return free_alpha({"kiu": np.exp(theta[names.index("kiu")]),
                       "kic": np.exp(theta[names.index("kic")])})


def pad(groups):
    """Stack per-compound (s, i, v[, sd]) arrays into padded (B, n) arrays and a mask.

    Parameters
    ----------
    groups : sequence of tuples of 1-D arrays
        One tuple per compound; all arrays of a tuple have the same length.

    Returns
    -------
    tuple of numpy.ndarray
        One (B, n_max) array per tuple position (padding 0), then the mask.
    """
    groups = list(groups)
    width = max((len(g[0]) for g in groups), default=0)
    n_arrays = len(groups[0]) if groups else 3
    out = [np.zeros((len(groups), width)) for _ in range(n_arrays)]
    mask = np.zeros((len(groups), width), dtype=bool)
    for row, g in enumerate(groups):
        n = len(g[0])
        for a, values in zip(out, g):
            a[row, :n] = values
        mask[row, :n] = True
    return (*out, mask)


def _check_arrays(s, i, v, mask, sd, need_inhibition, allow_zero_sd=False):
    """Why each compound cannot be fitted ('' when it can): each value's own checks here,
    then the grid rules of :func:`inhibkin.validate.grid_rule_problems`."""
    b = s.shape[0]
    reason = np.full(b, "", dtype=object)
    values = [("substrate", s), ("inhibitor", i), ("rate", v)]
    if sd is not None:
        values.append(("sd", sd))

    def flag(bad, text):
        fresh = bad & (reason == "")
        reason[fresh] = text

    for name, x in values:
        flag(np.any(~np.isfinite(x) & mask, axis=1), f"non-finite value (NaN or inf) in {name}")
    # Rates may be negative (noise around zero); concentrations and sd may not.
    for name, x in values:
        if name != "rate":
            flag(np.any((x < 0) & mask, axis=1),
                 f"negative value in {name}; it must be ≥ 0")
    if sd is not None and not allow_zero_sd:
        flag(np.any((sd == 0) & mask, axis=1), "standard deviation must be > 0")
    # The grid rules themselves are check_grid's, written once in inhibkin.validate.
    for c, problems in enumerate(grid_rule_problems(s, i, v, mask,
                                                    need_inhibition=need_inhibition)):
        if problems and reason[c] == "":
            reason[c] = str(problems[0])
    return reason


def _solve_model(name, s, i, v, mask, w, rows, theta0, lower, upper, max_iterations,
                 free=None):
    """Solve model ``name`` for the compounds ``rows`` from ``theta0`` (log scale); a
    parameter not ``free`` stays at its start (a given [E])."""
    theta0 = np.clip(theta0, lower + _START_MARGIN, upper - _START_MARGIN)
    if free is not None:
        theta0 = np.where(free, theta0, lower)
    return lm.solve(_LogRateLaw(name), theta0, (s[rows], i[rows]), v[rows], mask=mask[rows],
                    weights=w[rows], lower=lower, upper=upper, max_iterations=max_iterations,
                    free=free)


def _empty_model(name, b, n_obs, enzyme=None, fit_enzyme=False):
    """Empty result arrays of ``name``; a given [E] is not counted among its parameters
    (unless ``fit_enzyme``)."""
    law = MODELS[name]
    names = law.column_names
    k, m = law.n_params, len(names)
    nan = np.full((b, m), np.nan)
    return dict(model=name, names=names, estimate=nan.copy(), se=nan.copy(),
                ci_low=nan.copy(), ci_high=nan.copy(), determined=np.zeros((b, m), bool),
                theta=np.full((b, k), np.nan), log_covariance=np.full((b, k, k), np.nan),
                ssr=np.full(b, np.nan), loglik=np.full(b, np.nan), aic=np.full(b, np.nan),
                aicc=np.full(b, np.nan), bic=np.full(b, np.nan), n_obs=n_obs.copy(),
                n_params=k - (enzyme is not None and not fit_enzyme and "enzyme" in law.roles),
                converged=np.zeros(b, bool),
                status=np.zeros(b, np.int8), reason=np.full(b, "not fitted", dtype=object),
                iterations=np.zeros(b, np.int64), fallback=np.zeros(b, bool))


def _fill_from_engine(out, name, rows, result, s, i, mask, lower, upper, level,
                      determination_factor):
    """Estimates, Wald intervals and the determined flags, as fit_model derives them."""
    law = MODELS[name]
    k = law.n_params
    ok = result.converged
    r = rows[ok]
    theta = result.theta[ok]
    cov = result.covariance[ok]
    se_log = result.std_err[ok]
    dof = result.n_obs[ok] - out["n_params"]
    t = stats.t.ppf(0.5 + level / 2, np.maximum(dof, 1))[:, None]
    estimate = np.exp(theta)
    with np.errstate(over="ignore", invalid="ignore"):
        ci_low, ci_high = np.exp(theta - t * se_log), np.exp(theta + t * se_log)
    flags = determined_flags(law, theta, lower[ok], upper[ok], ci_low, ci_high, se_log,
                             s[r], i[r], mask[r], factor=determination_factor)
    determined = flags[:, :k]
    out["estimate"][r, :k] = estimate
    out["se"][r, :k] = estimate * se_log
    out["ci_low"][r, :k], out["ci_high"][r, :k] = ci_low, ci_high
    out["determined"][r, :k] = determined
    for m, d in enumerate(law.derived):
        a, b = law.param_names.index(d.denominator), law.param_names.index(d.numerator)
        var = cov[:, a, a] + cov[:, b, b] - 2 * cov[:, a, b]
        with np.errstate(invalid="ignore"):
            se_ratio = np.where(var >= 0, np.sqrt(np.abs(var)), np.nan)
        both = flags[:, k + m]
        centre = theta[:, b] - theta[:, a]
        with np.errstate(over="ignore", invalid="ignore"):
            lo_r = np.where(both, np.exp(centre - t[:, 0] * se_ratio), np.nan)
            hi_r = np.where(both, np.exp(centre + t[:, 0] * se_ratio), np.nan)
        ratio = np.exp(centre)
        out["estimate"][r, k + m] = ratio
        out["se"][r, k + m] = ratio * se_ratio
        out["ci_low"][r, k + m], out["ci_high"][r, k + m] = lo_r, hi_r
        out["determined"][r, k + m] = both
    out["theta"][r] = theta
    out["log_covariance"][r] = cov
    out["ssr"][r] = result.ssr[ok]
    out["converged"][r] = True
    out["status"][rows] = result.status
    out["reason"][rows] = result.reason
    out["iterations"][rows] += result.iterations
    failed = rows[~ok]
    for key in ("estimate", "se", "ci_low", "ci_high", "theta", "log_covariance", "ssr"):
        out[key][failed] = np.nan
    out["determined"][failed] = False
    out["converged"][failed] = False


def _fill_from_lmfit(out, c, fit: ModelFit):
    k = MODELS[out["model"]].n_params
    out["fallback"][c] = True
    out["reason"][c] = _MESSAGE_FALLBACK + fit.message
    out["converged"][c] = fit.converged
    # The lmfit path leaves out a derived quantity (alpha) it could not compute, e.g. for
    # a fit that did not converge: its row is missing (NaN, not determined) here too.
    table = fit.params.reindex(list(out["names"]))
    for key, col in (("estimate", "estimate"), ("se", "se"), ("ci_low", "ci_low"),
                     ("ci_high", "ci_high")):
        out[key][c] = table[col].to_numpy(float)
    out["determined"][c] = table["determined"].eq(True).to_numpy()
    out["ssr"][c] = fit.ssr
    with np.errstate(divide="ignore", invalid="ignore"):
        out["theta"][c] = np.log(table["estimate"].to_numpy()[:k])
    cov = fit.log_covariance
    out["log_covariance"][c] = np.nan if cov is None or not fit.converged else cov


def _relative_weights(s, i, v, mask, rows, max_iterations, fallback):
    """:func:`inhibkin.mechanism.fit.relative_weights` for the compounds ``rows``."""
    w = mask.astype(float)
    active = rows.copy()
    used_fallback = np.zeros(s.shape[0], bool)
    lower, upper = mechanism_log_bounds("mixed", s, i, v, mask)
    law = MODELS["mixed"]
    for _ in range(REWEIGHT_ITERATIONS):
        if not active.size:
            break
        start = np.log(mechanism_starts("mixed", s[active], i[active], v[active],
                                        mask[active], w[active]))
        result = _solve_model("mixed", s, i, v, mask, w, active, start, lower[active],
                              upper[active], max_iterations)
        ok = result.converged
        if fallback:
            used_fallback[active[~ok]] = True
        good = active[ok]
        p = np.exp(result.theta[ok])
        fitted = law.rate(s[good], i[good], *(p[:, [j]] for j in range(p.shape[1])))
        w[good] = relative_weights_from_fitted(fitted, mask[good])
        active = good
    w = normalise_weights(w, mask)
    for c in np.flatnonzero(used_fallback):
        keep = mask[c]
        w[c, keep] = relative_weights(s[c, keep], i[c, keep], v[c, keep])
    return w, used_fallback


def _f_tests(models, small, large, exact_ssr):
    """Vectorised :func:`inhibkin.core.compare.f_test` for one nested pair (NaN unless both
    fits converged); SSRs at or below ``exact_ssr`` count as exact fits, as in
    :func:`inhibkin.core.compare.f_test_table`."""
    a, b = models[small], models[large]
    return _f_test_arrays(a["ssr"], a["converged"], a["n_params"], b, exact_ssr)


def _f_test_arrays(ssr_small, converged_small, k_small, b, exact_ssr):
    """:func:`inhibkin.core.compare.f_test_arrays` where both fits converged, with SSRs at or
    below ``exact_ssr`` counted as exact fits (as in
    :func:`~inhibkin.core.compare.f_test_table`)."""
    n = b["n_obs"]
    both = converged_small & b["converged"]
    ssr_a = np.where(ssr_small > exact_ssr, ssr_small, 0.0)
    ssr_b = np.where(b["ssr"] > exact_ssr, b["ssr"], 0.0)
    f_value, p_value = f_test_arrays(ssr_a, n - k_small, ssr_b, n - b["n_params"])
    return np.where(both, f_value, np.nan), np.where(both, p_value, np.nan)


def _verdicts(models, p_values, valid, invalid_reason, options):
    """:func:`inhibkin.core.compare.decide` for every compound, same rules and wording."""
    b = len(valid)
    verdict = np.empty(b, dtype=object)
    best = np.empty(b, dtype=object)
    candidates = np.empty(b, dtype=object)
    reason = np.empty(b, dtype=object)

    def p_of(small, large, c):
        pair = p_values.get((small, large))
        return float(pair[1][c]) if pair is not None else np.nan

    def conv(name, c):
        return name in models and bool(models[name]["converged"][c])

    for c in range(b):
        if not valid[c]:
            verdict[c], best[c], candidates[c], reason[c] = \
                "failed", None, (), invalid_reason[c]
            continue
        out = decide_from(p_value=lambda small, large, c=c: p_of(small, large, c),
                          converged=lambda name, c=c: conv(name, c),
                          aicc=lambda name, c=c: float(models[name]["aicc"][c]),
                          options=options,
                          free_alpha=lambda law, c=c: _free_alpha(models[law]["theta"][c], law)
                          if conv(law, c) else np.nan)
        verdict[c], best[c], candidates[c], reason[c] = \
            out.verdict, out.best, out.candidates, out.reason
    return verdict, best, candidates, reason


def _fixed_alpha_tests(out, s, i, v, mask, w, rows, far, exact_ssr, options,
                       max_iterations, fallback, model="mixed", enzyme=None, fit_enzyme=False):
    """F-tests of mixed (or a family's general law, ``model``) with alpha held at each
    edge against the same law free, for every compound of ``rows``: the lmfit path's
    fixed-alpha tests (:func:`inhibkin.mechanism.one_model.fixed_alpha_ssr`) over the
    same starts (the law's solution, then each nested law's of its family), the best
    successful SSR winning. With ``fallback``, a compound none of whose starts converged
    is refitted by the lmfit path from the same starts. With ``enzyme`` (shape (B,)), a
    tight-binding law's [E] is held at it (fitted with ``fit_enzyme``). NaN for
    compounds outside ``rows``."""
    general = out[model]
    law = MODELS[model]
    kiu = law.param_names.index("kiu")
    names = tuple(n for n in law.param_names if n != "kiu")
    b = s.shape[0]
    sub = rows[general["converged"][rows]]
    starts = [np.delete(general["theta"][sub], kiu, axis=1)]
    for name in out:
        if (MODELS[name].inhibition_constants and model in MODELS[name].nests_in
                and MODELS[name].family == law.family):
            ok = out[name]["converged"][sub]
            start = np.delete(_nested_start(out[name], name, sub, far, model), kiu, axis=1)
            starts.append((start, ok))
    tests = {}
    for value in options.alpha_values:
        best_ssr = np.full(b, np.nan)
        for k, start in enumerate(starts if sub.size else ()):
            start, ok = (start, np.ones(sub.size, bool)) if k == 0 else start
            if not ok.any():
                continue
            use = sub[ok]
            lower, upper, free, _ = _bounds(model, s, i, v, mask, use, enzyme, fit_enzyme)
            lower, upper = np.delete(lower, kiu, axis=1), np.delete(upper, kiu, axis=1)
            free = None if free is None else np.delete(free, kiu, axis=1)
            theta0 = np.clip(start[ok], lower + _START_MARGIN, upper - _START_MARGIN)
            if free is not None:
                theta0 = np.where(free, theta0, lower)
            result = lm.solve(_FixedAlphaLaw(value, model), theta0, (s[use], i[use]), v[use],
                              mask=mask[use], weights=w[use], lower=lower, upper=upper,
                              free=free, max_iterations=max_iterations)
            better = result.converged & ~(result.ssr >= best_ssr[use])
            best_ssr[use[better]] = result.ssr[better]
        if fallback:
            for c in sub[~np.isfinite(best_ssr[sub])]:
                keep = mask[c]
                held = [dict(zip(names, np.exp(theta))) for theta in _start_rows(starts, sub, c)]
                held = [{**x, "kiu": value * x["kic"]} for x in held]
                given = None if enzyme is None else float(enzyme[c])
                best_ssr[c] = fixed_alpha_ssr(s[c, keep], i[c, keep], v[c, keep], w[c, keep],
                                              value, held, model, given, fit_enzyme)
        tests[(options.alpha_row(value, model), model)] = _f_test_arrays(
            best_ssr, np.isfinite(best_ssr), general["n_params"] - 1, general, exact_ssr)
    return tests


def _start_rows(starts, sub, c):
    """The starting log-parameters of compound ``c`` among ``starts`` (as built by
    :func:`_fixed_alpha_tests`: the first an array, the others (array, usable) pairs)."""
    at = int(np.flatnonzero(sub == c)[0])
    rows = [starts[0][at]]
    rows += [start[at] for start, ok in starts[1:] if ok[at]]
    return rows


def _nested_start(out, name, rows, far, large="mixed"):
    """The start of ``large`` (mixed by default) from the solution of the nested model
    ``name`` (log scale), by :func:`inhibkin.core.models.nested_start`."""
    p = np.exp(out["theta"][rows])
    values = {n: p[:, j] for j, n in enumerate(MODELS[name].param_names)}
    start = nested_start(name, values, large, far[rows])
    return np.log(np.stack([start[n] for n in MODELS[large].param_names], axis=1))


def _fit_chunk(s, i, v, mask, sd, enzyme=None, *, weighting, models, alpha, min_delta_aicc,
               alpha_factor, level, determination_factor, fallback, max_iterations,
               lack_of_fit_alpha=LACK_OF_FIT_ALPHA, edge_sides=EDGE_SIDES,
               fit_enzyme=False) -> MechanismBatch:
    """Fit one chunk of compounds (the unit of work sent to a worker)."""
    b = s.shape[0]
    need_inhibition = any(m != "none" for m in models)
    invalid_reason = _check_arrays(s, i, v, mask, sd if weighting in SD_WEIGHTINGS else None,
                                   need_inhibition, allow_zero_sd=weighting == "rate_se")
    valid = invalid_reason == ""
    n_obs = mask.sum(axis=1)
    # Invalid compounds are left out of every fit.
    mask = mask & valid[:, None]
    rows = np.flatnonzero(valid)
    weight_fallback = np.zeros(b, bool)
    if weighting == "rate_se":
        w = rate_se_weights(s, i, v, np.where(mask, sd, 1.0), mask)
    elif weighting == "sd":
        with np.errstate(divide="ignore"):
            w = np.where(mask, 1.0 / np.where(mask, sd, 1.0), 0.0)
    elif weighting == "relative":
        w, weight_fallback = _relative_weights(s, i, v, mask, rows, max_iterations, fallback)
    else:
        w = mask.astype(float)
    with np.errstate(divide="ignore"):
        sum_log_w = np.sum(np.where(mask, np.log(np.where(mask, w, 1.0)), 0.0), axis=1)
    out: dict[str, dict] = {}
    for name in models:
        res = _empty_model(name, b, n_obs, enzyme, fit_enzyme)
        lower, upper, free, held = _bounds(name, s, i, v, mask, rows, enzyme, fit_enzyme)
        start = np.log(mechanism_starts(name, s[rows], i[rows], v[rows], mask[rows], w[rows],
                                        held))
        result = _solve_model(name, s, i, v, mask, w, rows, start, lower, upper,
                              max_iterations, free)
        if name == "mixed":
            far = np.zeros(b)
            far[rows] = np.exp(upper[:, 2]) / NESTED_FAR_FACTOR
            result = _mixed_multistart(out, s, i, v, mask, w, rows, result, lower, upper, far,
                                       max_iterations)
        _fill_from_engine(res, name, rows, result, s, i, mask, lower, upper, level,
                          determination_factor)
        if fallback:
            for c in rows[~result.converged]:
                _refit(res, name, c, s, i, v, mask, w, out, level, determination_factor,
                       enzyme, fit_enzyme)
        criteria = information_criteria(res["ssr"], n_obs, res["n_params"], sum_log_w)
        res.update((key, criteria[key]) for key in ("loglik", "aic", "aicc", "bic"))
        out[name] = res
    # The tables keep the models' own order, whatever order they were fitted in.
    out = {name: out[name] for name in MODELS if name in out}
    exact_ssr = EXACT_FIT_RTOL * np.sum((w * np.where(mask, v, 0.0)) ** 2, axis=1)
    p_values = {pair: _f_tests(out, *pair, exact_ssr) for pair in nested_pairs(tuple(out))}
    options = VerdictOptions(alpha=alpha, min_delta_aicc=min_delta_aicc,
                             alpha_factor=alpha_factor, lack_of_fit_alpha=lack_of_fit_alpha,
                             edge_sides=edge_sides)
    if "mixed" in out:
        far = np.zeros(b)
        far[rows] = np.exp(mechanism_log_bounds("mixed", s[rows], i[rows], v[rows],
                                                mask[rows])[1][:, 2]) / NESTED_FAR_FACTOR
        p_values.update(_fixed_alpha_tests(out, s, i, v, mask, w, rows, far, exact_ssr,
                                           options, max_iterations, fallback))
    verdict, best, candidates, reason = _verdicts(out, p_values, valid, invalid_reason,
                                                  options)
    lack = _rule_five(out, p_values, verdict, best, candidates, reason, s, i, v, mask, w,
                      rows, n_obs, sum_log_w, exact_ssr, options, level, determination_factor,
                      max_iterations, weighting == "relative", enzyme, fallback, fit_enzyme)
    for c in np.flatnonzero(~valid):
        for res in out.values():
            res["reason"][c] = f"not fitted: {invalid_reason[c]}"
    batches = {name: ModelBatch(**res) for name, res in out.items()}
    return MechanismBatch(batches, verdict, best, candidates, reason, p_values, s, i, v, mask,
                          w, valid, weight_fallback, weighting_label(weighting), options, level,
                          lack)


def _weighted_residuals(res, rows, s, i, v, mask, w, relative=False):
    """w·(v − fitted) of model ``res`` for the compounds ``rows`` (0 where masked); with
    ``relative``, (v − fitted)/fitted, as :func:`inhibkin.mechanism.fit.lack_of_fit_rows`."""
    law = MODELS[res["model"]]
    p = np.exp(res["theta"][rows])
    with np.errstate(all="ignore"):
        fitted = law.rate(s[rows], i[rows], *(p[:, [j]] for j in range(p.shape[1])))
        scale = 1 / np.where(fitted > 0, fitted, np.inf) if relative else w[rows]
    return np.where(mask[rows], scale * (v[rows] - fitted), 0.0)


def _lack_rows(res, rows, s, i, v, mask, w, exact_ssr, relative):
    """The lack-of-fit rows of model ``res`` for the compounds ``rows`` (NaN for an exact
    fit, as :func:`inhibkin.mechanism.fit.lack_of_fit_rows`)."""
    method, statistic, p_value = lack_of_fit(_weighted_residuals(res, rows, s, i, v, mask, w,
                                                                 relative),
                                             s[rows], i[rows], mask[rows], res["n_params"])
    exact = res["ssr"][rows] <= exact_ssr[rows]
    statistic, p_value = np.where(exact, np.nan, statistic), np.where(exact, np.nan, p_value)
    return pd.DataFrame({"compound": rows, "model": res["model"], "method": method,
                         "statistic": statistic, "p_value": p_value})


def _bounds(name, s, i, v, mask, rows, enzyme=None, fit_enzyme=False):
    """Log bounds of ``name`` for the compounds ``rows``, the free mask (None: all free)
    and the given [E] (None), the start's: with ``enzyme`` given, a tight-binding law's
    [E] is held there, as :func:`inhibkin.mechanism.one_model.fit_model` holds it, or
    only starts there with ``fit_enzyme``."""
    law = MODELS[name]
    lower, upper = mechanism_log_bounds(name, s[rows], i[rows], v[rows], mask[rows])
    if enzyme is None or "enzyme" not in law.roles:
        return lower, upper, None, None
    j = law.roles.index("enzyme")
    held = enzyme[rows]
    if fit_enzyme:
        return lower, upper, None, held
    lower[:, j] = upper[:, j] = np.log(held)
    free = np.ones(lower.shape, bool)
    free[:, j] = False
    return lower, upper, free, held


def _solve_extended(name, out, s, i, v, mask, w, rows, max_iterations, enzyme=None,
                    fit_enzyme=False):
    """Extended law ``name`` for the compounds ``rows`` from the starts of
    :func:`inhibkin.mechanism.fit.extended_starts` (automatic; the classical solution with
    the family's constant at its start and at its classical limit; each nested law of
    the family's solution), the best SSR winning. With ``enzyme`` (shape (B,)), a
    tight-binding law's [E] is held at it (with ``fit_enzyme``, the automatic start's)."""
    law = MODELS[name]
    lower, upper, free, held = _bounds(name, s, i, v, mask, rows, enzyme, fit_enzyme)
    starts = [np.log(mechanism_starts(name, s[rows], i[rows], v[rows], mask[rows], w[rows],
                                      held))]
    classical = out[law.extends]
    role = law.roles[-1]
    for value in (extra_start(role, s[rows], i[rows], mask[rows]),
                  classical_limit(role, lower[:, -1], upper[:, -1])):
        starts.append(np.column_stack([classical["theta"][rows], np.log(value)]))
    s_max = np.max(np.where(mask[rows], s[rows], 0.0), axis=1)
    for small, res in out.items():
        if name in MODELS[small].nests_in and MODELS[small].family == law.family:
            far = np.exp(upper[:, law.param_names.index("kic")]) / NESTED_FAR_FACTOR \
                if "kic" in law.param_names else s_max
            p = np.exp(res["theta"][rows])
            values = {n: p[:, j] for j, n in enumerate(MODELS[small].param_names)}
            start = nested_start(small, values, name, far)
            starts.append(np.log(np.stack([start[n] for n in law.param_names], axis=1)))
    best = None
    for theta0 in starts:
        usable = np.all(np.isfinite(theta0), axis=1)
        theta0 = np.where(usable[:, None], theta0, starts[0])
        result = _solve_model(name, s, i, v, mask, w, rows, theta0, lower, upper,
                              max_iterations, free)
        if best is None:
            best = _Combined(result.theta.copy(), result.ssr.copy(), result.status.copy(),
                             result.iterations.copy(), result.n_obs, result.covariance.copy())
            continue
        best.iterations += result.iterations
        better = result.converged & (~best.converged | (result.ssr < best.ssr))
        best.theta[better], best.ssr[better] = result.theta[better], result.ssr[better]
        best.status[better] = result.status[better]
        best.covariance[better] = result.covariance[better]
    return best, lower, upper


def _tight_binding_inputs(out, best, i, mask, rows):
    """Per compound of ``rows``: the classical verdict's tightest ranking constant (NaN
    without one) and the lowest non-zero inhibitor level, as
    :func:`inhibkin.mechanism.fit.tight_binding_inputs` reads them from one fit."""
    tight = np.full(rows.size, np.nan)
    for n, c in enumerate(rows):
        name = best[c]
        if name in out and MODELS[name].ranking and out[name]["converged"][c]:
            columns = [out[name]["names"].index(p) for p in MODELS[name].ranking]
            tight[n] = np.min(out[name]["estimate"][c, columns])
    lowest = np.min(np.where(mask[rows] & (i[rows] > 0), i[rows], np.inf), axis=1)
    return tight, np.where(np.isfinite(lowest), lowest, np.nan)


def _refit_extended(res, name, rows, s, i, v, mask, w, out, level, determination_factor,
                    enzyme, fit_enzyme=False):
    """Refit with the lmfit path, from :func:`inhibkin.mechanism.fit.extended_starts`, the
    compounds of ``rows`` whose extended law ``name`` the engine did not converge."""
    for c in rows[~res["converged"][rows]]:
        keep = mask[c]
        sc, ic, vc, wc = s[c, keep], i[c, keep], v[c, keep], w[c, keep]
        given = None if enzyme is None else float(enzyme[c])
        fits = {m: _model_fit(ModelBatch(**out[m]), c, sc, ic, vc, level) for m in out}
        fit = fit_model(name, sc, ic, vc, wc, intervals="wald", level=level,
                        determination_factor=determination_factor, enzyme=given,
                        fit_enzyme=fit_enzyme,
                        starts=extended_starts(name, fits, sc, ic, vc, wc, given))
        _fill_from_lmfit(res, c, fit)


def _extension_gains(out, best, s, i, v, mask, w, rows, n_obs, exact_ssr, options, level,
                     determination_factor, max_iterations, enzyme, fallback=False,
                     fit_enzyme=False):
    """Per family, the p-values (shape (B,)) of the F-test of mixed against the family's
    general law, for the compounds ``rows`` whose verdict names inhibition (NaN elsewhere,
    and for tight binding with [E] held; with ``fit_enzyme`` its probe starts from the
    given [E]): :func:`inhibkin.mechanism.fit.extension_gains`."""
    gains = {family: np.full(s.shape[0], np.nan) for family in FAMILIES}
    if options.lack_of_fit_alpha <= 0 or "mixed" not in out:
        return gains
    probe_rows = rows[(best[rows] != "none") & out["mixed"]["converged"][rows]]
    for family in FAMILIES:
        start = enzyme if family == "tight_binding" else None
        if not probe_rows.size or (start is not None and not fit_enzyme):
            continue
        name = extension_of("mixed", family)
        probe = _empty_model(name, s.shape[0], n_obs)
        result, lower, upper = _solve_extended(name, out, s, i, v, mask, w, probe_rows,
                                               max_iterations, start, True)
        _fill_from_engine(probe, name, probe_rows, result, s, i, mask, lower, upper, level,
                          determination_factor)
        if fallback:
            _refit_extended(probe, name, probe_rows, s, i, v, mask, w, out, level,
                            determination_factor, start, True)
        # As inhibkin.mechanism.fit.extension_gains: mixed's SSR is no larger than any
        # nested law's, and a gain below the exact-fit scale is rounding.
        lowest = functools.reduce(np.fmin, [np.where(out[n]["converged"], out[n]["ssr"], np.nan)
                                            for n in MODEL_NAMES if n in out])
        reference = {**out["mixed"], "ssr": lowest}
        p_gain = _f_tests({"mixed": reference, name: probe}, "mixed", name, exact_ssr)[1]
        ssr = [np.where(x > exact_ssr, x, 0.0) for x in (lowest, probe["ssr"])]
        gains[family] = np.where(ssr[0] - ssr[1] > exact_ssr, p_gain, np.nan)
    return gains


def _rule_five(out, p_values, verdict, best, candidates, reason, s, i, v, mask, w, rows,
               n_obs, sum_log_w, exact_ssr, options, level, determination_factor,
               max_iterations, relative, enzyme=None, fallback=False, fit_enzyme=False):
    """Rule 5 of :mod:`inhibkin.core.compare` for every compound, as
    :func:`inhibkin.mechanism.fit.extended_verdict` applies it to one: the lack-of-fit test
    of the verdict's model; the extended laws of every family fitted (by the engine) for
    the compounds that fail it or meet the tight-binding rule, and
    :func:`~inhibkin.core.compare.decide_extended` on each. Updates the verdict arrays,
    ``out`` and ``p_values`` in place; returns the lack-of-fit rows."""
    tables = []
    for name in (n for n in MODEL_NAMES if n in out):
        at = rows[(best[rows] == name) & out[name]["converged"][rows]]
        if at.size:
            tables.append(_lack_rows(out[name], at, s, i, v, mask, w, exact_ssr, relative))
    tested = pd.concat(tables, ignore_index=True) if tables else _LACK_COLUMNS.copy()
    tested = tested.sort_values("compound", ignore_index=True)
    compounds = tested["compound"].to_numpy(dtype=int)
    p_tested = dict(zip(compounds, tested["p_value"].to_numpy(dtype=float)))
    tight, lowest = _tight_binding_inputs(out, best, i, mask, compounds)
    given = (lambda c: None) if enzyme is None else (lambda c: float(enzyme[c]))
    gains = _extension_gains(out, best, s, i, v, mask, w, compounds, n_obs, exact_ssr,
                             options, level, determination_factor, max_iterations, enzyme,
                             fallback, fit_enzyme)
    due = np.array([options.lack_of_fit_alpha > 0
                    and (p_tested[c] < options.lack_of_fit_alpha
                         or needs_tight_binding(tight[n], given(c))
                         or (best[c] != "none" and bool(extension_signs(
                             {f: p[c] for f, p in gains.items()}, tight[n], lowest[n],
                             options, given(c), fit_enzyme))))
                    for n, c in enumerate(compounds)], bool)
    fail = compounds[due]
    for n, c in enumerate(compounds):
        if due[n]:
            continue
        # The tight-binding signs that need no extended fit (rule 5 of compare).
        decided = decide_extended(
            Verdict(verdict[c], best[c], candidates[c], reason[c]),
            lack_of_fit_p=p_tested[c], pattern="", p_value=lambda a, b: np.nan,
            converged=lambda m: False, aicc=lambda m: np.inf,
            extended_lack_of_fit_p=lambda m: np.nan, options=options, enzyme=given(c),
            fit_enzyme=fit_enzyme, tight_constant=tight[n], lowest_inhibitor=lowest[n])
        verdict[c], best[c], candidates[c], reason[c] = \
            decided.verdict, decided.best, decided.candidates, decided.reason
    b = s.shape[0]
    order = [n for n in EXTENDED_MODELS if MODELS[n].extends in out and n not in out]
    # Every chunk carries every extended law (empty where no compound tried it), so the
    # chunks join key by key.
    for name in order:
        res = _empty_model(name, b, n_obs, enzyme, fit_enzyme)
        if fail.size:
            result, lower, upper = _solve_extended(name, out, s, i, v, mask, w, fail,
                                                   max_iterations, enzyme, fit_enzyme)
            _fill_from_engine(res, name, fail, result, s, i, mask, lower, upper, level,
                              determination_factor)
            if fallback:
                _refit_extended(res, name, fail, s, i, v, mask, w, out, level,
                                determination_factor, enzyme, fit_enzyme)
            tables.append(_lack_rows(res, fail[res["converged"][fail]], s, i, v, mask, w,
                                     exact_ssr, relative))
        criteria = information_criteria(res["ssr"], n_obs, res["n_params"], sum_log_w)
        res.update((key, criteria[key]) for key in ("loglik", "aic", "aicc", "bic"))
        out[name] = res
    ordered = {name: out[name] for name in MODELS if name in out}
    out.clear()
    out.update(ordered)
    # Every nested pair in the models' order, then the fixed-alpha tests (rule 4).
    fixed = {pair: p for pair, p in p_values.items() if pair[0] not in MODELS}
    nested = {pair: p_values[pair] if pair in p_values else _f_tests(out, *pair, exact_ssr)
              for pair in nested_pairs(tuple(out))}
    p_values.clear()
    p_values.update({**nested, **fixed})
    # Rule 4 within each family: its general law's own fixed-alpha tests, for the
    # compounds whose extended laws were fitted (NaN elsewhere; every chunk has the keys).
    for general in (extension_of("mixed", family) for family in FAMILIES):
        if general in out:
            far = np.zeros(b)
            if fail.size:
                far[fail] = np.exp(mechanism_log_bounds(
                    general, s[fail], i[fail], v[fail], mask[fail])[1][
                        :, MODELS[general].param_names.index("kic")]) / NESTED_FAR_FACTOR
            p_values.update(_fixed_alpha_tests(out, s, i, v, mask, w, fail, far, exact_ssr,
                                               options, max_iterations, fallback, general,
                                               enzyme, fit_enzyme))
    if not fail.size:
        return tested
    lack = pd.concat(tables, ignore_index=True)
    p_lof = {(c, m): p for c, m, p in zip(lack["compound"], lack["model"], lack["p_value"])}
    patterns = dict(zip(fail, residual_pattern(
        np.stack([_weighted_residuals(out[best[c]], np.array([c]), s, i, v, mask, w,
                                      relative)[0]
                  for c in fail]), s[fail], mask[fail], i[fail])))
    position = {c: n for n, c in enumerate(compounds)}

    def p_of(small, large, c):
        pair = p_values.get((small, large))
        return float(pair[1][c]) if pair is not None else np.nan

    for c in fail:
        classical_verdict = Verdict(verdict[c], best[c], candidates[c], reason[c])
        decided = decide_extended(
            classical_verdict, lack_of_fit_p=p_lof[(c, best[c])], pattern=patterns[c],
            p_value=lambda small, large, c=c: p_of(small, large, c),
            converged=lambda name, c=c: name in out and bool(out[name]["converged"][c]),
            aicc=lambda name, c=c: float(out[name]["aicc"][c]),
            extended_lack_of_fit_p=lambda name, c=c: p_lof.get((c, name), np.nan),
            options=options, enzyme=given(c), fit_enzyme=fit_enzyme,
            tight_constant=tight[position[c]],
            lowest_inhibitor=lowest[position[c]],
            free_alpha=lambda law, c=c: _free_alpha(out[law]["theta"][c], law)
            if law in out and bool(out[law]["converged"][c]) else np.nan,
            fitted_enzyme=lambda law, c=c: _fitted_enzyme(out.get(law), c))
        verdict[c], best[c], candidates[c], reason[c] = \
            decided.verdict, decided.best, decided.candidates, decided.reason
    return lack.sort_values(["compound"], kind="stable", ignore_index=True)


def _fitted_enzyme(res, c):
    """(estimate, ci_low, ci_high, determined) of compound ``c``'s [E] in the
    tight-binding result arrays ``res`` (None when not converged), as
    :func:`inhibkin.mechanism.fit.extended_verdict` reads it from one fit."""
    if res is None or not res["converged"][c] or "enzyme" not in res["names"]:
        return None
    j = res["names"].index("enzyme")
    return (float(res["estimate"][c, j]), float(res["ci_low"][c, j]),
            float(res["ci_high"][c, j]), bool(res["determined"][c, j]))


class _Combined:
    """The best of several LMResults per problem, with the fields _fill_from_engine reads."""

    def __init__(self, theta, ssr, status, iterations, n_obs, covariance):
        self.theta, self.ssr, self.status = theta, ssr, status
        self.iterations, self.n_obs, self.covariance = iterations, n_obs, covariance

    @property
    def converged(self):
        return self.status > 0

    @property
    def reason(self):
        return lm.LMResult(self.theta, self.ssr, self.status, self.iterations, self.n_obs,
                           self.n_obs, self.covariance, self.converged).reason

    @property
    def std_err(self):
        with np.errstate(invalid="ignore"):
            return np.sqrt(np.diagonal(self.covariance, axis1=1, axis2=2))


def _mixed_multistart(out, s, i, v, mask, w, rows, first, lower, upper, far, max_iterations):
    """fit_model's rule over mixed's starts: the first result, then any successful one
    with a lower SSR (the starts of :func:`inhibkin.mechanism.fit.mixed_starts`)."""
    best = _Combined(first.theta.copy(), first.ssr.copy(), first.status.copy(),
                     first.iterations.copy(), first.n_obs, first.covariance.copy())
    position = np.full(s.shape[0], -1)
    position[rows] = np.arange(rows.size)
    for name in ONE_CONSTANT_MODELS:
        if name not in out:
            continue
        sub = rows[out[name]["converged"][rows]]
        if not sub.size:
            continue
        at = position[sub]
        start = _nested_start(out[name], name, sub, far)
        result = _solve_model("mixed", s, i, v, mask, w, sub, start, lower[at], upper[at],
                              max_iterations)
        best.iterations[at] += result.iterations
        better = result.converged & (~best.converged[at] | (result.ssr < best.ssr[at]))
        take = at[better]
        best.theta[take] = result.theta[better]
        best.ssr[take] = result.ssr[better]
        best.status[take] = result.status[better]
        best.covariance[take] = result.covariance[better]
    return best


def _refit(res, name, c, s, i, v, mask, w, out, level, determination_factor, enzyme=None,
           fit_enzyme=False):
    """Refit one (compound, model) with the lmfit path after the engine failed; a
    tight-binding law keeps the compound's given [E] (``enzyme``, shape (B,)), held or,
    with ``fit_enzyme``, as its start, as the engine had it."""
    keep = mask[c]
    sc, ic, vc, wc = s[c, keep], i[c, keep], v[c, keep], w[c, keep]
    starts = None
    if name == "mixed":
        fits = {m: _model_fit(ModelBatch(**out[m]), c, sc, ic, vc, level) for m in out}
        starts = mixed_starts(fits, sc, ic, vc, wc)
    given = None if enzyme is None else float(enzyme[c])
    fit = fit_model(name, sc, ic, vc, wc, starts=starts, intervals="wald", level=level,
                    determination_factor=determination_factor, enzyme=given,
                    fit_enzyme=fit_enzyme and given is not None)
    _fill_from_lmfit(res, c, fit)


def fit_mechanism_arrays(s, i, v, mask=None, *, sd=None, weighting=DEFAULT_WEIGHTING,
                         models=MODEL_NAMES, alpha=0.05, min_delta_aicc=2.0, alpha_factor=5.0,
                         level=0.95, determination_factor=DETERMINATION_FACTOR, fallback=True,
                         max_iterations=lm.MAX_ITERATIONS, client=None,
                         chunk_size=None, lack_of_fit_alpha=LACK_OF_FIT_ALPHA,
                         enzyme=None, edge_sides=EDGE_SIDES, fit_enzyme=False) -> MechanismBatch:
    """Fit every mechanism to every compound of padded arrays and decide between them.

    Parameters
    ----------
    s, i, v : array_like, shape (B, n)
        Substrate and inhibitor concentrations and initial rates, one row per compound,
        padded to a common width (see :func:`pad`). Units as in
        :func:`inhibkin.mechanism.fit.fit_mechanisms`: km in the substrate's unit, inhibition
        constants in the inhibitor's, vmax in the rate's.
    mask : array_like of bool, shape (B, n), optional
        True for real points (default: all).
    sd : array_like, shape (B, n), optional
        Standard deviations of the rates, for ``weighting="sd"``; the rates' standard
        errors for ``weighting="rate_se"``.
    weighting : {"relative", "uniform", "sd", "rate_se"}
        As :func:`inhibkin.mechanism.fit.fit_mechanisms` (default relative: arrays carry no
        column names, so ``rate_se`` is chosen by name here).
    models : sequence of str
        Models to fit, in fitting order; the verdict needs ``none`` and ``mixed``.
    alpha, min_delta_aicc, alpha_factor : float
        Verdict thresholds (:class:`inhibkin.core.compare.VerdictOptions`).
    level : float
        Confidence level of the (log-scale Wald) intervals.
    determination_factor : float
        As :func:`inhibkin.mechanism.one_model.fit_model`.
    fallback : bool
        Refit with the lmfit path every fit the engine does not converge (counted in
        :attr:`MechanismBatch.n_fallback`).
    max_iterations : int
        Engine iteration bound per fit.
    client : dask.distributed.Client, optional
        Run the chunks on this cluster's workers.
    chunk_size : int, optional
        Compounds per chunk (default: one chunk locally, and
        :data:`inhibkin.engine.chunks.DEFAULT_CHUNK_SIZE` on a client).
    lack_of_fit_alpha : float
        Level of the lack-of-fit test (rule 5 of :mod:`inhibkin.core.compare`; 0 turns it off).
    enzyme : array_like, shape (B,), optional
        The active enzyme concentration of every compound, in the inhibitor's unit
        (all given, or None): the tight-binding laws hold [E] there.
    edge_sides : {1, 2}
        Rule 4's edge test, as :func:`inhibkin.mechanism.fit.fit_mechanisms`.
    fit_enzyme : bool
        With ``enzyme``: the tight-binding laws fit [E] from it, as
        :func:`inhibkin.mechanism.fit.fit_mechanisms` (``OptionError`` without ``enzyme``).

    Returns
    -------
    MechanismBatch
        Every input compound appears once; compounds whose data cannot be fitted have
        the verdict ``failed`` and say why.
    """
    FitOptions(weighting=weighting, intervals="wald", level=level, alpha=alpha,
               min_delta_aicc=min_delta_aicc, alpha_factor=alpha_factor,
               determination_factor=determination_factor, lack_of_fit_alpha=lack_of_fit_alpha,
               edge_sides=edge_sides, fit_enzyme=fit_enzyme)
    check_fit_enzyme(fit_enzyme, enzyme)
    if weighting in SD_WEIGHTINGS and sd is None:
        raise DataError(f"weighting={weighting!r} needs sd=, the standard deviations (or "
                        "standard errors) of the rates")
    unknown = [m for m in models if m not in MODELS]
    if unknown:
        raise DataError(f"unknown models {unknown}; known: {', '.join(MODELS)}")
    s = np.atleast_2d(np.asarray(s, dtype=float))
    i = np.asarray(i, dtype=float).reshape(s.shape)
    v = np.asarray(v, dtype=float).reshape(s.shape)
    mask = np.ones(s.shape, bool) if mask is None else np.asarray(mask, bool).reshape(s.shape)
    sd = None if sd is None else np.asarray(sd, dtype=float).reshape(s.shape)
    if enzyme is not None:
        enzyme = np.broadcast_to(np.asarray(enzyme, dtype=float), s.shape[:1]).copy()
        if not (np.all(np.isfinite(enzyme)) and np.all(enzyme > 0)):
            raise DataError("enzyme: give one positive concentration per compound (or none)")
    options = dict(weighting=weighting, models=tuple(models), alpha=alpha,
                   min_delta_aicc=min_delta_aicc, alpha_factor=alpha_factor, level=level,
                   determination_factor=determination_factor, fallback=fallback,
                   max_iterations=max_iterations, lack_of_fit_alpha=lack_of_fit_alpha,
                   edge_sides=edge_sides, fit_enzyme=bool(fit_enzyme))
    arrays = (s, i, v, mask, sd, enzyme)
    parts = run_chunks(_fit_chunk, arrays, options, client=client, chunk_size=chunk_size)
    return concat_batches(parts)


_ARRAY_COLUMNS = ("substrate", "inhibitor", "rate", "sd")


def _array_table(arrays, key) -> pd.DataFrame:
    """A compound given as arrays ``(s, i, v[, sd])``, as the table check_grid reads, so
    that arrays and tables meet the same checks (a bad entry is a DataError naming it)."""
    if not isinstance(arrays, (tuple, list)) or not 3 <= len(arrays) <= 4:
        raise DataError(f"expected a DataFrame or a tuple (s, i, v[, sd]), got "
                        f"{type(arrays).__name__}", f"compound {key!r}")
    columns = [np.atleast_1d(np.asarray(a, dtype=object)) for a in arrays]
    lengths = [c.size for c in columns]
    if len(set(lengths)) > 1 or any(c.ndim != 1 for c in columns):
        raise DataError([Problem(name, None, n, "arrays differ in length (one entry per "
                                                "point in each)")
                         for name, n in zip(_ARRAY_COLUMNS, lengths)], f"compound {key!r}")
    return pd.DataFrame(dict(zip(_ARRAY_COLUMNS, columns)))


def _as_groups(items, substrate, inhibitor, rate, sd, weighting, need_inhibition,
               enzyme=None):
    """Validated per-compound arrays, each compound's active enzyme concentration (NaN
    when not given), or the DataError text for each bad compound."""
    groups, labels, errors, enzymes = [], [], [], []
    for key, item in items:
        given = None
        try:
            if isinstance(item, pd.DataFrame):
                sc, ic, vc, sdc, units = molar_grid(
                    item, substrate=substrate, inhibitor=inhibitor, rate=rate,
                    sd=sd if weighting in SD_WEIGHTINGS else None,
                    need_inhibition=need_inhibition, context=f"compound {key!r}",
                    allow_zero_sd=weighting == "rate_se")
                given = enzyme_concentration(item, enzyme, units["inhibitor"],
                                             f"compound {key!r}")
                index = item.index
            else:
                sc, ic, vc, sdc = check_grid(_array_table(item, key), substrate="substrate",
                                             inhibitor="inhibitor", rate="rate",
                                             sd="sd" if weighting in SD_WEIGHTINGS else None,
                                             need_inhibition=need_inhibition,
                                             context=f"compound {key!r}",
                                             allow_zero_sd=weighting == "rate_se")
                index = pd.RangeIndex(len(vc))
                given = None if enzyme is None else enzyme_concentration(
                    pd.DataFrame(), enzyme, None, f"compound {key!r}")
        except DataError as exc:
            groups.append((np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0)))
            labels.append(pd.RangeIndex(0))
            errors.append(str(exc))
            enzymes.append(np.nan)
            continue
        sdc = np.ones_like(vc) if sdc is None else sdc
        groups.append((sc, ic, vc, sdc))
        labels.append(index)
        errors.append("")
        enzymes.append(np.nan if given is None else given)
    return groups, labels, errors, np.array(enzymes, dtype=float)


def fit_mechanisms_batch(tables_or_arrays, *, substrate="substrate", inhibitor="inhibitor",
                         rate="rate", sd=None, weighting=None,
                         models=MODEL_NAMES,
                         alpha=0.05, min_delta_aicc=2.0, alpha_factor=5.0, level=0.95,
                         determination_factor=DETERMINATION_FACTOR, fallback=True,
                         max_iterations=lm.MAX_ITERATIONS, client=None, chunk_size=None,
                         lack_of_fit_alpha=LACK_OF_FIT_ALPHA, enzyme=None,
                         edge_sides=EDGE_SIDES, fit_enzyme=False):
    """:func:`inhibkin.mechanism.fit.fit_mechanisms` (Wald intervals) for many compounds at once.

    Parameters
    ----------
    tables_or_arrays : mapping or sequence
        One entry per compound: a DataFrame (columns named by ``substrate``,
        ``inhibitor``, ``rate`` and ``sd``) or a tuple of arrays ``(s, i, v[, sd])``. A
        mapping keeps its keys as compound labels.
    substrate, inhibitor, rate, sd : str
        Column names, as in :func:`~inhibkin.mechanism.fit.fit_mechanisms`.
    weighting : {None, "relative", "uniform", "sd", "rate_se"}
        As :func:`~inhibkin.mechanism.fit.fit_mechanisms`: None is ``rate_se`` when every
        table has a ``rate_se`` column (and ``sd`` is not given), else relative.
    models, alpha, min_delta_aicc, alpha_factor, level, determination_factor : see
        :func:`fit_mechanism_arrays`.
    fallback, max_iterations, client, chunk_size, lack_of_fit_alpha, edge_sides : see
        :func:`fit_mechanism_arrays`.
    enzyme : float or str, optional
        As :func:`~inhibkin.mechanism.fit.fit_mechanisms` (a number, text with its unit, or
        a column; a table's ``enzyme_<unit>`` column is read when it is None).
    fit_enzyme : bool
        As :func:`~inhibkin.mechanism.fit.fit_mechanisms`: the tight-binding laws fit [E]
        from each compound's given value. An ``OptionError`` when no compound has [E];
        a compound without it (no ``enzyme_<unit>`` column in its table) is fitted as
        without [E], which fits it anyway.

    Returns
    -------
    list or dict of MechanismFit
        In input order (a dict for mapping input). A compound whose table fails
        validation gets the verdict ``failed`` with the validation message as reason;
        it never stops the others.
    """
    is_mapping = isinstance(tables_or_arrays, Mapping)
    items = list(tables_or_arrays.items()) if is_mapping else \
        list(enumerate(tables_or_arrays))
    if weighting is None:
        # One weighting for the batch: rate_se only when every table carries it.
        tables = [item for _, item in items if isinstance(item, pd.DataFrame)]
        has_se = bool(tables) and len(tables) == len(items) and all(
            resolve_weighting(None, t.columns, sd)[0] == "rate_se" for t in tables)
        weighting = "rate_se" if has_se else DEFAULT_WEIGHTING
    weighting, sd = resolve_weighting(weighting, (), sd)
    FitOptions(weighting=weighting, intervals="wald", level=level, alpha=alpha,
               min_delta_aicc=min_delta_aicc, alpha_factor=alpha_factor,
               determination_factor=determination_factor, lack_of_fit_alpha=lack_of_fit_alpha,
               edge_sides=edge_sides, fit_enzyme=fit_enzyme)
    need_inhibition = any(m != "none" for m in models)
    groups, labels, errors, enzymes = _as_groups(items, substrate, inhibitor, rate, sd,
                                                 weighting, need_inhibition, enzyme)
    given = np.isfinite(enzymes)
    check_fit_enzyme(fit_enzyme, enzyme if enzyme is not None or given.any() else None)
    if not groups:
        return {} if is_mapping else []
    s, i, v, sdv, mask = pad(groups)
    if s.shape[1] == 0:
        s, i, v, sdv = (np.zeros((len(groups), 1)) for _ in range(4))
        mask = np.zeros((len(groups), 1), bool)
    fits = [None] * len(groups)
    # Compounds with [E] given and without it are two batches: a given [E] is held, so
    # their tight-binding laws have one fitted parameter fewer.
    for part in (np.flatnonzero(~given), np.flatnonzero(given)):
        if not part.size:
            continue
        batch = fit_mechanism_arrays(
            s[part], i[part], v[part], mask[part],
            sd=sdv[part] if weighting in SD_WEIGHTINGS else None, weighting=weighting,
            models=models, alpha=alpha, min_delta_aicc=min_delta_aicc,
            alpha_factor=alpha_factor, level=level, determination_factor=determination_factor,
            fallback=fallback, max_iterations=max_iterations, client=client,
            chunk_size=chunk_size, lack_of_fit_alpha=lack_of_fit_alpha,
            enzyme=enzymes[part] if given[part[0]] else None, edge_sides=edge_sides,
            fit_enzyme=bool(fit_enzyme) and bool(given[part[0]]))
        for n, c in enumerate(part):
            fits[c] = batch.mechanism_fit(n, labels[c])
    for c, error in enumerate(errors):
        fit = fits[c]
        if error:
            fit = MechanismFit("failed", None, (), error, fit.models, fit.comparison,
                               fit.ftests, fit.data, fit.weighting, fit.options,
                               fit.lack_of_fit)
        else:
            # The rates stage's well flags, as fit_mechanisms reads them (rule 6, the
            # product-inhibition warning).
            table = items[c][1]
            if isinstance(table, pd.DataFrame) and RATE_FLAGS in table.columns:
                flags = table[RATE_FLAGS]
                if len(flags) != len(fit.data):
                    flags = flags.reindex(fit.data.index)
                fit = with_rate_flags(fit, flags.to_numpy())
        fits[c] = fit
    if is_mapping:
        return {key: fit for (key, _), fit in zip(items, fits)}
    return fits

