"""One fit of every progress curve at once: the scheme's constants shared by every well.

Every well w follows P_w(t) = P0_w + vs_w·t + (vi_w − vs_w)·(1 − e^(−kobs_w·t))/kobs_w
with kobs_w given by the scheme at the well's [I] (:data:`.schemes.SCHEMES`): kon and koff
(one-step), kinact or k5, KI,app and k6 (two-step). The scheme's constants are shared;
the offset P0_w, initial rate vi_w and (reversible binding) steady-state rate vs_w are
each well's own (vi falls with [I] through the rapid first step, plates differ in
offset); irreversible inhibition holds vs_w = 0 and the off-rate at 0. Fitted in one
:func:`scipy.optimize.least_squares` call on the scale of
:func:`.dependence.fit_scheme` (log constants, the off-rate linear and ≥ 0; a dense
finite-difference Jacobian, which on a plate's few dozen parameters was about 100 times
faster than declaring its sparsity to the bounded solver), the covariance of the shared
constants from the Jacobian with the residual variance estimated. This route uses every
read rather than one kobs per well, and agrees with the kobs route of :mod:`.dependence`
within their intervals (tests/test_time_dependent.py, on mass-action ODE plates of every
scheme). Given a :class:`.depletion.Depletion` (irreversible inhibition), each well's curve
is :func:`.depletion.depleting_curve` instead: the substrate the well consumes is carried.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from .dependence import SchemeFit, unpack_theta
from .depletion import Depletion, depleting_curve
from .schemes import SCHEMES, onset

__all__ = ["fit_global"]


def fit_global(t, y, valid, inhibitor, *, start: SchemeFit, irreversible=True,
               depletion: Depletion | None = None) -> SchemeFit:
    """The scheme of ``start`` fitted to padded (wells, reads) progress curves at once.

    Parameters
    ----------
    t, y : numpy.ndarray
        Times and signals, shape (wells, reads), NaN padded.
    valid : numpy.ndarray of bool
    inhibitor : numpy.ndarray
        [I] of each well.
    start : SchemeFit
        The kobs route's fit of the scheme (:func:`.dependence.fit_scheme`): its scheme,
        fitted-scale names and estimates start the shared constants.
    irreversible : bool
        vs = 0 in every well and the off-rate held at 0 (as ``start`` was fitted).
    depletion : Depletion, optional
        Carry each well's substrate depletion (irreversible only; module notes).

    Returns
    -------
    SchemeFit
        Of ``start``'s scheme: ``values``, ``theta`` and ``cov`` of the shared constants
        (fitted scale, the names in ``free``), ``ssr``, ``n``, ``k`` (every parameter,
        per-well ones included), ``dof``, ``converged``.
    """
    scheme, free = start["scheme"], start["free"]
    entry = SCHEMES[scheme]
    n_wells, n_shared = t.shape[0], len(free)
    n_local = 2 if irreversible else 3
    rows, cols = np.nonzero(valid)
    tt, yy, ii = t[rows, cols], y[rows, cols], inhibitor[rows]
    scale = max(np.ptp(yy), np.finfo(float).tiny)

    def kobs(theta, conc):
        values = unpack_theta(scheme, theta, irreversible)
        return entry.function(conc, *(values[p] for p in entry.params))

    def linear_start():
        g = onset(t, kobs(start["theta"], inhibitor)[:, None])
        local = np.zeros((n_local, n_wells))
        for w in range(n_wells):
            tw, gw = t[w, valid[w]], g[w, valid[w]]
            columns = [np.ones_like(tw), gw] + ([] if irreversible else [tw - gw])
            local[:, w] = np.linalg.lstsq(np.column_stack(columns), y[w, valid[w]],
                                          rcond=None)[0]
        return local.ravel()

    t_read = np.where(valid, t, 0.0)

    def residual(theta):
        local = theta[n_shared:].reshape(n_local, n_wells)
        if depletion is not None:
            model = depleting_curve(t_read, local[0], local[1], inhibitor, scheme=scheme,
                                    values=unpack_theta(scheme, theta[:n_shared], True),
                                    depletion=depletion)[rows, cols]
            return (model - yy) / scale
        g = onset(tt, kobs(theta[:n_shared], ii))
        model = local[0, rows] + local[1, rows] * g
        if not irreversible:
            model = model + local[2, rows] * (tt - g)
        return (model - yy) / scale

    n_par = n_shared + n_local * n_wells
    lower = np.full(n_par, -np.inf)
    lower[:n_shared] = [0.0 if name == entry.off_rate else -np.inf for name in free]
    x0 = np.concatenate([start["theta"], linear_start()])
    x0[:n_shared] = np.maximum(x0[:n_shared], lower[:n_shared])
    res = optimize.least_squares(residual, x0, method="trf",
                                 bounds=(lower, np.inf), x_scale="jac",
                                 xtol=1e-12, ftol=1e-12, gtol=1e-12)
    jac = res.jac * scale
    n = len(tt)
    ssr = float(np.sum((res.fun * scale) ** 2))
    dof = n - n_par
    cov = (ssr / dof) * np.linalg.pinv(jac.T @ jac)[:n_shared, :n_shared]
    return SchemeFit(scheme=scheme, values=unpack_theta(scheme, res.x[:n_shared], irreversible),
                     theta=res.x[:n_shared], cov=cov, ssr=ssr, n=n, k=n_par, dof=dof,
                     converged=bool(res.success), free=free, sum_log_weights=0.0)
