"""One fit of every progress curve of an irreversible inhibitor: shared kinact and KI.

Every well w follows P_w(t) = P0_w + vi_w·(1 − e^(−kobs_w·t))/kobs_w with
kobs_w = kinact·[I]_w/(KI,app + [I]_w): kinact and KI,app are shared, the offset P0_w and
initial rate vi_w are each well's own (vi falls with [I] through the rapid first step,
and plates differ in offset). Fitted in one :func:`scipy.optimize.least_squares` call
(log kinact and log KI,app; sparse Jacobian structure declared), the covariance of the
two shared constants from the Jacobian with the residual variance estimated. This route
uses every read rather than one kobs per well, and agrees with the two-step route of
:mod:`.dependence` within their intervals (tests/test_time_dependent.py).
"""

from __future__ import annotations

import numpy as np
from scipy import optimize
from scipy.sparse import lil_matrix

from .dependence import SchemeFit
from .schemes import kobs_two_step, onset

__all__ = ["fit_global_inactivation"]


def fit_global_inactivation(t, y, valid, inhibitor, *, kinact_start, ki_start):
    """Shared kinact and KI,app from padded (wells, reads) progress curves.

    Parameters
    ----------
    t, y : numpy.ndarray
        Times and signals, shape (wells, reads), NaN padded.
    valid : numpy.ndarray of bool
    inhibitor : numpy.ndarray
        [I] of each well.
    kinact_start, ki_start : float
        Starting values (the two-step route's estimates serve).

    Returns
    -------
    SchemeFit
        Of scheme ``two_step`` with k6 = 0: ``values`` kinact (as k5) and ki (KI,app),
        ``theta`` (log k5, log ki), ``cov`` (2 × 2), ``ssr``, ``n``, ``k``, ``dof``.
    """
    n_wells = t.shape[0]
    rows, cols = np.nonzero(valid)
    tt, yy, ii = t[rows, cols], y[rows, cols], inhibitor[rows]
    scale = max(np.ptp(yy), np.finfo(float).tiny)

    def linear_start():
        k = kobs_two_step(inhibitor, kinact_start, ki_start)
        g = onset(t, k[:, None])
        p0, vi = np.zeros(n_wells), np.zeros(n_wells)
        for w in range(n_wells):
            a = np.column_stack([np.ones(valid[w].sum()), g[w, valid[w]]])
            p0[w], vi[w] = np.linalg.lstsq(a, y[w, valid[w]], rcond=None)[0]
        return p0, vi

    def residual(theta):
        kinact, ki = np.exp(theta[0]), np.exp(theta[1])
        p0, vi = theta[2:2 + n_wells], theta[2 + n_wells:]
        k = kobs_two_step(ii, kinact, ki)
        return (p0[rows] + vi[rows] * onset(tt, k) - yy) / scale

    sparsity = lil_matrix((len(tt), 2 + 2 * n_wells), dtype=int)
    sparsity[:, :2] = 1
    sparsity[np.arange(len(tt)), 2 + rows] = 1
    sparsity[np.arange(len(tt)), 2 + n_wells + rows] = 1
    p0, vi = linear_start()
    x0 = np.concatenate([[np.log(kinact_start), np.log(ki_start)], p0, vi])
    res = optimize.least_squares(residual, x0, jac_sparsity=sparsity, method="trf",
                                 x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12)
    jac = res.jac.toarray() * scale
    n, k = len(tt), len(x0)
    ssr = float(np.sum((res.fun * scale) ** 2))
    dof = n - k
    cov = (ssr / dof) * np.linalg.pinv(jac.T @ jac)[:2, :2]
    return SchemeFit(scheme="two_step",
                     values={"k5": float(np.exp(res.x[0])), "ki": float(np.exp(res.x[1])),
                             "k6": 0.0},
                     theta=res.x[:2], cov=cov, ssr=ssr, n=n, k=k, dof=dof,
                     converged=bool(res.success), free=("log_k5", "log_ki"),
                     sum_log_weights=0.0)
