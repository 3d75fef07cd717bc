"""Product formed over time under a rate law: the curve a whole-curve fit fits.

At a fixed inhibitor concentration every classical law is Michaelis–Menten in S with
apparent constants (mixed: Vapp = vmax/(1 + I/kiu), Kapp = km(1 + I/kic)/(1 + I/kiu)).
They are read from the law's own rate function (S/v is linear in S), so no list of
models is kept here. Integrating −dS/dt = Vapp·S/(Kapp + S) gives the closed form

    S(t) = Kapp · W( (S0/Kapp) · exp((S0 − Vapp·t)/Kapp) ),   P(t) = S0 − S(t)

with W the Lambert W function (Schnell & Mendoza 1997, J. Theor. Biol. 187:207; Goudar,
Sonnad & Duggleby 1999, BBA 1429:377), written once in
:mod:`inhibkin.core.integrated_rate_law` (the integrated initial rates read it too).

Where the closed form does not hold the rate law is integrated numerically
(``scipy.integrate.solve_ivp``, LSODA) and the result says so (``integration``):

* product inhibition (``product_ki``: the product binds the free enzyme, competing with
  the substrate and with the inhibitor's free-enzyme binding, so the free-enzyme term
  km·(1 + I/kic) becomes km·(1 + I/kic + P/Kp); Kp known and in the substrate's unit);
* laws that are not hyperbolic in S (the substrate-inhibited extensions).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.integrate import solve_ivp

from ..core.integrated_rate_law import closed_form_product, closed_form_sensitivities
from ..core.models import MODELS, general_law, nested_start
from ..errors import DataError

__all__ = ["INTEGRATIONS", "CLOSED_FORM", "ODE", "WellCurves", "apparent_constants",
           "closed_form_product", "closed_form_sensitivities", "ode_product",
           "product_formed", "integration_of"]

#: How the product curve is computed: ``auto`` (closed form where it holds, else the
#: ODE), ``closed`` (refused where it does not hold) or ``ode``.
INTEGRATIONS = ("auto", "closed", "ode")
CLOSED_FORM = "closed form (integrated Michaelis–Menten, Lambert W)"
ODE = "ODE (scipy solve_ivp, LSODA)"

# Step (log units) of the central differences of the apparent constants.
_APPARENT_STEP = 1e-6
# S/v must be linear in S to within this relative error for the closed form to hold.
_HYPERBOLIC_RTOL = 1e-9
# ODE tolerances: relative, and absolute as a fraction of the largest substrate.
_ODE_RTOL = 1e-8
_ODE_ATOL_FRACTION = 1e-12


def apparent_constants(law, inhibitor, params, scale, *, check=True):
    """Vapp and Kapp of a law that is hyperbolic in S, at each inhibitor level.

    S/v = (Kapp + S)/Vapp is evaluated at S = ``scale`` and 2·``scale`` (the law's own
    rate function), which gives both constants; with ``check``, None when S/v is not
    linear in S (the law is not Michaelis–Menten in S at fixed I; a third point tells).
    """
    s1, s2, s3 = scale, 2.0 * scale, 5.0 * scale
    shape = np.shape(inhibitor)
    with np.errstate(divide="ignore", invalid="ignore"):
        q1, q2 = (s / law.rate(np.full(shape, s), inhibitor, *params) for s in (s1, s2))
        slope = (q2 - q1) / (s2 - s1)  # 1/Vapp
        intercept = q1 - slope * s1    # Kapp/Vapp
        if check:
            q3 = s3 / law.rate(np.full(shape, s3), inhibitor, *params)
            if not np.allclose(q3, intercept + slope * s3, rtol=_HYPERBOLIC_RTOL, atol=0):
                return None
        return 1.0 / slope, intercept / slope


def ode_product(law, params, times, s0, inhibitor, product_ki=None):
    """Product formed at ``times`` (per well, one row each) by integrating the law.

    dP/dt = rate(S0 − P, I) with the law's own rate function. With ``product_ki`` the
    product binds the free enzyme (E + P ⇌ EP, exclusive with ES and EI), which adds
    P/Kp to the free-enzyme term: km·(1 + I/kic) → km·(1 + I/kic + P/Kp) =
    km·(1 + x)·(1 + I/(kic·(1 + x))), x = P/Kp. The law is therefore evaluated in its
    family's general form (mixed, or its extension) with km and kic both scaled by
    (1 + x), which holds for every family (the tight-binding apparent constant and the
    substrate-inhibition term included); kiu and the partial turnover are untouched.
    All wells are one system of independent equations, solved once.

    Parameters
    ----------
    law : RateLaw
    params : sequence of float
        The law's parameters in ``law.param_names`` order.
    times : numpy.ndarray, shape (wells, reads)
        Times (s); NaN where a well has fewer reads.
    s0, inhibitor : numpy.ndarray, shape (wells,)
    product_ki : float, optional
    """
    general = general_law(law)
    in_general = nested_start(law.name, dict(zip(law.param_names, params)), general.name,
                              np.inf)
    base = np.array([in_general[p] for p in general.param_names], dtype=float)
    free_enzyme = [general.param_names.index(p) for p in ("km", "kic")]

    def rhs(_t, p):
        values = list(base)
        if product_ki is not None:
            for j in free_enzyme:
                values[j] = base[j] * (1.0 + p / product_ki)
        return general.rate(np.maximum(s0 - p, 0.0), inhibitor, *values)

    grid = np.unique(times[np.isfinite(times)])
    end = float(grid[-1]) if len(grid) else 0.0
    atol = _ODE_ATOL_FRACTION * max(float(np.max(s0)), np.finfo(float).tiny)
    out = np.full(times.shape, np.nan)
    if end <= 0:
        return np.where(np.isfinite(times), 0.0, np.nan)
    sol = solve_ivp(rhs, (0.0, end), np.zeros(len(s0)), method="LSODA", t_eval=grid,
                    rtol=_ODE_RTOL, atol=atol)
    if not sol.success:
        return out
    column = np.searchsorted(grid, np.where(np.isfinite(times), times, grid[0]))
    values = sol.y[np.arange(len(s0))[:, None], column]
    return np.where(np.isfinite(times), values, np.nan)


def product_formed(model, params, time, substrate, inhibitor, *, integration="auto",
                   product_ki=None) -> np.ndarray:
    """Product formed by each read under ``model`` (the curve
    :func:`inhibkin.fit_progress_curves` fits, without the well's offset).

    Parameters
    ----------
    model : str
        A law of :data:`inhibkin.core.models.MODELS`.
    params : mapping of str to float
        Its parameters (vmax per s, in the substrate's unit).
    time, substrate, inhibitor : array_like
        One entry per read: time (s), the well's initial substrate and inhibitor.
    integration : {"auto", "closed", "ode"}
    product_ki : float, optional
        Competitive product inhibition constant (substrate's unit); forces the ODE.

    Returns
    -------
    numpy.ndarray
        Product (the substrate's unit), one per read.
    """
    t, s, i = (np.asarray(x, dtype=float) for x in (time, substrate, inhibitor))
    curve = WellCurves.from_reads(t, s, i)
    law = MODELS[model]
    method = integration_of(law, integration, product_ki, curve.scale)
    return curve.product(law, [params[p] for p in law.param_names], method, product_ki)


def integration_of(law, integration, product_ki, scale) -> str:
    """:data:`CLOSED_FORM` or :data:`ODE` for ``law`` under the option ``integration``.

    The closed form needs a law hyperbolic in S (tested on the law's own rate function
    at unit-free probe values around ``scale``, the typical substrate level) and no
    product inhibition.

    Raises
    ------
    DataError
        ``integration="closed"`` for a law the closed form does not describe.
    """
    probe = np.array([0.0, scale])
    params = np.ones(law.n_params) * scale
    hyperbolic = apparent_constants(law, probe, params, scale) is not None
    if integration == "ode" or product_ki is not None:
        return ODE
    if not hyperbolic:
        if integration == "closed":
            raise DataError(f"{law.name} is not hyperbolic in the substrate: the closed "
                            "form does not hold; use integration='ode' or 'auto'")
        return ODE
    return CLOSED_FORM


@dataclass(frozen=True)
class WellCurves:
    """One compound's reads laid out by well: codes, times, and each well's S0 and I.

    ``code`` is each read's well index, ``t`` its time (s); ``s0`` and ``inhibitor`` are
    per well; ``grid`` holds the times by well (NaN padded, for the ODE) and ``column``
    each read's place in it.
    """

    code: np.ndarray        # well index of each read
    t: np.ndarray           # time of each read (s)
    s0: np.ndarray          # per well
    inhibitor: np.ndarray   # per well
    grid: np.ndarray        # (wells, reads) times, NaN padded, for the ODE
    column: np.ndarray      # each read's column in ``grid``

    @classmethod
    def from_reads(cls, t, s, i, code=None):
        if code is None:
            keys = pd.MultiIndex.from_arrays([s, i])
            code = pd.factorize(keys)[0]
        n_wells = int(code.max()) + 1 if len(code) else 0
        s0 = np.zeros(n_wells)
        inhibitor = np.zeros(n_wells)
        s0[code] = s
        inhibitor[code] = i
        order = np.lexsort((t, code))
        counts = np.bincount(code, minlength=n_wells)
        starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
        column = np.empty(len(t), int)
        column[order] = np.arange(len(t)) - starts[code[order]]
        grid = np.full((n_wells, int(counts.max()) if n_wells else 0), np.nan)
        grid[code, column] = t
        return cls(code, t, s0, inhibitor, grid, column)

    @property
    def scale(self) -> float:
        positive = self.s0[self.s0 > 0]
        return float(np.median(positive)) if len(positive) else 1.0

    def product(self, law, params, method, product_ki=None):
        if method == ODE:
            return ode_product(law, params, self.grid, self.s0, self.inhibitor,
                               product_ki)[self.code, self.column]
        vapp, kapp = apparent_constants(law, self.inhibitor, params, self.scale,
                                        check=False)
        return closed_form_product(self.t, self.s0[self.code], vapp[self.code],
                                   kapp[self.code])

    def product_jacobian(self, law, theta):
        """dP/dtheta (theta the log-parameters) of the closed form, per read: the
        sensitivities to Vapp and Kapp times dVapp/dtheta and dKapp/dtheta, the latter
        by central differences over the wells' levels (cheap: one value per well)."""
        params = np.exp(theta)
        vapp, kapp = apparent_constants(law, self.inhibitor, params, self.scale, check=False)
        d_v, d_k = closed_form_sensitivities(self.t, self.s0[self.code], vapp[self.code],
                                             kapp[self.code])
        out = np.empty((len(self.t), len(theta)))
        for j in range(len(theta)):
            step = np.zeros(len(theta))
            step[j] = _APPARENT_STEP
            up = apparent_constants(law, self.inhibitor, np.exp(theta + step), self.scale,
                                    check=False)
            down = apparent_constants(law, self.inhibitor, np.exp(theta - step), self.scale,
                                      check=False)
            dv = (up[0] - down[0]) / (2 * _APPARENT_STEP)
            dk = (up[1] - down[1]) / (2 * _APPARENT_STEP)
            out[:, j] = d_v * dv[self.code] + d_k * dk[self.code]
        return out
