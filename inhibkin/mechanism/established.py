"""What an ambiguous verdict still establishes: the leading mechanism, the constants the
data determine (with their intervals) and the limits on those they do not.

When the grid cannot tell two mechanisms apart, the model that nests every candidate
(mixed) still sets some constants: a grid whose free-enzyme constant runs far past the
tested range determines kiu and says only that kic lies above a limit. :func:`established`
reads that from the fit's determined flags (:mod:`inhibkin.core.determined`) and keeps the
limits as :class:`~inhibkin.core.bound.Bound` values; they become text only in
:meth:`Established.text`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..core.bound import Bound
from ..units import from_molar, molar_unit

__all__ = ["Established", "established"]

@dataclass(frozen=True)
class Established:
    """The leading mechanism, its determined constants and the bounds on the others.

    Attributes
    ----------
    leading : str
        The leading one-constant candidate (the fit's ``best``).
    model : str
        The model the constants are read from (mixed when it converged, else ``leading``).
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
    mixed = fit.models.get("mixed")
    model = mixed if mixed is not None and mixed.converged else fit.best_fit
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
            low = float(row["ci_low"])
            bounds.append((name, Bound(">", low) if math.isfinite(low) and low > 0 else None))
    return Established(fit.best, model.model, tuple(determined), tuple(bounds))


