"""What an ambiguous verdict still establishes: the leading mechanism, the constants the
data determine (with their intervals) and the limits on those they do not.

When the grid cannot tell two mechanisms apart, the model that nests every candidate
(mixed, or for an extended verdict its family's general law: mixed_si for
"competitive_si, mixed_si", since the data have rejected the classical laws) still sets
some constants: a grid whose free-enzyme constant runs far past the tested range
determines kiu and says only that kic lies above a limit. :func:`established` reads that
from the fit's determined flags (:mod:`inhibkin.core.determined`) and keeps the limits as
:class:`~inhibkin.core.bound.Bound` values; they become text only in
:meth:`Established.text`. A family's own constant not determined is a limit on its side:
ksi above its lower limit (past the substrate levels), [E] and beta below their upper
limit (the classical law to any precision down to zero).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..core.bound import Bound
from ..core.models import MODELS, general_law
from ..units import from_molar, molar_unit

__all__ = ["Established", "established"]

# Ratios and fractions (alpha = kiu/kic, beta), written without a concentration unit.
_UNITLESS = ("alpha", "beta")


@dataclass(frozen=True)
class Established:
    """The leading mechanism, its determined constants and the bounds on the others.

    Attributes
    ----------
    leading : str
        The leading one-constant candidate (the fit's ``best``).
    model : str
        The model the constants are read from (the general law of the leading
        candidate's family, mixed for a classical one, when it converged; else
        ``leading``).
    determined : tuple of (str, float, float, float)
        Name, estimate, interval low and high, in the fit's units (M when the fit's
        headers declared units).
    bounds : tuple of (str, Bound or None)
        Each constant not determined, with the limit the data set on it (None when they
        set none).
    """

    leading: str
    model: str
    determined: tuple
    bounds: tuple

    def text(self, *, molar=False) -> str:
        """One line, e.g. ``"leading uncompetitive; kiu 2.1 µM [1.8, 2.5]; kic > 360 µM
        not excluded"``; ``molar=True`` writes each constant in the unit its size
        suggests (the constants are then in M), else in the fit's units."""
        def scaled(value, reference):
            if not molar:
                return value, ""
            unit = molar_unit(reference)
            return from_molar(value, unit), f" {unit}"

        parts = [f"leading {self.leading}"]
        for name, estimate, low, high in self.determined:
            if name in _UNITLESS:
                value, unit, lo, hi = estimate, "", low, high
            else:
                value, unit = scaled(estimate, estimate)
                lo, hi = (scaled(x, estimate)[0] for x in (low, high))
            parts.append(f"{name} {value:.3g}{unit} [{lo:.3g}, {hi:.3g}]")
        for name, bound in self.bounds:
            if bound is None:
                parts.append(f"{name} not determined")
                continue
            value, unit = scaled(bound.value, bound.value)
            parts.append(f"{name} {bound.side} {value:.3g}{unit} not excluded")
        return "; ".join(parts)


def established(fit) -> Established | None:
    """What an ambiguous :class:`~inhibkin.mechanism.fit.MechanismFit` establishes, or None
    when its verdict is not ambiguous."""
    if fit.verdict != "ambiguous" or fit.best is None:
        return None
    general = fit.models.get(general_law(MODELS[fit.best]).name) if fit.best in MODELS \
        else None
    model = general if general is not None and general.converged else fit.best_fit
    law = MODELS.get(model.model)
    role = dict(zip(law.param_names, law.roles)) if law is not None else {}
    params = model.params
    determined, bounds = [], []
    for name in params.index:
        if name in ("vmax", "km"):
            continue
        row = params.loc[name]
        if bool(row["determined"]):
            determined.append((name, float(row["estimate"]), float(row["ci_low"]),
                               float(row["ci_high"])))
        elif name != "alpha":  # alpha follows from kic and kiu
            bounds.append((name, _limit(row, role.get(name))))
    return Established(fit.best, model.model, tuple(determined), tuple(bounds))


def _limit(row, role) -> Bound | None:
    """The limit the data set on a constant they do not determine (None for none): an
    upper one for [E] and beta, whose classical limit is zero, a lower one otherwise."""
    if role in ("enzyme", "partial"):
        high = float(row["ci_high"])
        return Bound("<", high) if math.isfinite(high) and high > 0 else None
    low = float(row["ci_low"])
    return Bound(">", low) if math.isfinite(low) and low > 0 else None
