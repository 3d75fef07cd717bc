"""The integrated Michaelis–Menten equation in closed form, and its sensitivities.

Integrating −dS/dt = V·S/(K + S) from S0 gives

    S(t) = K · W( (S0/K) · exp((S0 − V·t)/K) ),   P(t) = S0 − S(t)

with W the Lambert W function (Schnell & Mendoza 1997, J. Theor. Biol. 187:207; Goudar,
Sonnad & Duggleby 1999, BBA 1429:377). It is evaluated as K·ω(ln(S0/K) + (S0 − V·t)/K),
ω the Wright omega function (``scipy.special.wrightomega``, ω(x) = W(eˣ)), which does not
overflow when S0 ≫ K. Two stages read it: the whole-curve fit
(:mod:`inhibkin.mechanism.product_curve`) and the integrated initial rates
(:mod:`inhibkin.rates.integrated`); it lives here so neither imports the other.
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = ["closed_form_product", "closed_form_sensitivities"]


def closed_form_product(t, s0, vapp, kapp):
    """Product formed by time ``t`` under Michaelis–Menten kinetics (Lambert W form).

    Parameters
    ----------
    t : numpy.ndarray
        Times (s).
    s0, vapp, kapp : numpy.ndarray
        Initial substrate, apparent vmax (per s) and apparent km, broadcast with ``t``;
        concentrations in one unit.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        x = np.log(s0 / kapp) + (s0 - vapp * t) / kapp
        s = kapp * np.real(special.wrightomega(x))
    return np.where(s0 > 0, s0 - s, 0.0)


def closed_form_sensitivities(t, s0, vapp, kapp):
    """dP/dVapp and dP/dKapp of :func:`closed_form_product`, per read.

    From the implicit form S + Kapp·ln S = S0 + Kapp·ln S0 − Vapp·t: dS/dVapp =
    −t·S/(S + Kapp) and dS/dKapp = S·ln(S0/S)/(S + Kapp); P = S0 − S.
    """
    s = s0 - closed_form_product(t, s0, vapp, kapp)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(s > 0, s / (s + kapp), 0.0)
        log_ratio = np.where(s > 0, np.log(s0 / s), 0.0)
    return t * share, -share * log_ratio
