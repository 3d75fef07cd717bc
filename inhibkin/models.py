"""Reversible steady-state rate laws, as data.

Every model is one :class:`RateLaw` entry in :data:`MODELS`: its name, its parameter
names, a vectorised rate function, its analytic Jacobian and the models it nests in.
All five are special cases of the mixed (general linear) rate law

    v = vmax*S / (km*(1 + I/kic) + S*(1 + I/kiu))

with kic (inhibitor binding free enzyme) or kiu (inhibitor binding the ES complex)
sent to infinity, or tied (kic = kiu = ki for noncompetitive). Adding a mechanism means
adding one entry here; the fitting, comparison and batched engine read everything
they need from it.

Units: S and km share the substrate's unit, I, kic, kiu and ki the inhibitor's; v and
vmax share the rate's unit. Nothing here converts units.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

__all__ = ["RateLaw", "MODELS", "MODEL_NAMES", "INHIBITION_MODELS", "get_model", "nested_pairs"]


@dataclass(frozen=True)
class RateLaw:
    """One reversible inhibition mechanism.

    Parameters
    ----------
    name : str
        Mechanism name, one of the trade's terms.
    param_names : tuple of str
        Parameter names in the order the rate and Jacobian functions take them.
    rate : callable
        ``rate(s, i, *params) -> v``, vectorised over ``s`` and ``i``.
    jacobian : callable
        ``jacobian(s, i, *params) -> array of shape (n, k)``: dv/dparam, one column
        per parameter in ``param_names`` order.
    nests_in : tuple of str
        Names of the larger models this one is a special case of (one constraint
        or limit away, or more).
    equation : str
        The rate law in plain text, for reports.
    """

    name: str
    param_names: tuple[str, ...]
    rate: Callable[..., np.ndarray]
    jacobian: Callable[..., np.ndarray]
    nests_in: tuple[str, ...]
    equation: str

    @property
    def n_params(self) -> int:
        """Number of fitted parameters."""
        return len(self.param_names)

    @property
    def inhibition_constants(self) -> tuple[str, ...]:
        """The parameters that are inhibition constants (everything but vmax and km)."""
        return tuple(p for p in self.param_names if p not in ("vmax", "km"))


def _none_rate(s, i, vmax, km):
    return vmax * s / (km + s)


def _none_jac(s, i, vmax, km):
    d = km + s
    return np.stack([s / d, -vmax * s / d**2], axis=-1)


def _mixed_rate(s, i, vmax, km, kic, kiu):
    return vmax * s / (km * (1 + i / kic) + s * (1 + i / kiu))


def _mixed_jac(s, i, vmax, km, kic, kiu):
    a = 1 + i / kic
    d = km * a + s * (1 + i / kiu)
    g = vmax * s / d**2
    return np.stack(
        [s / d, -g * a, g * km * i / kic**2, g * s * i / kiu**2],
        axis=-1,
    )


def _competitive_rate(s, i, vmax, km, kic):
    return vmax * s / (km * (1 + i / kic) + s)


def _competitive_jac(s, i, vmax, km, kic):
    a = 1 + i / kic
    d = km * a + s
    g = vmax * s / d**2
    return np.stack([s / d, -g * a, g * km * i / kic**2], axis=-1)


def _uncompetitive_rate(s, i, vmax, km, kiu):
    return vmax * s / (km + s * (1 + i / kiu))


def _uncompetitive_jac(s, i, vmax, km, kiu):
    d = km + s * (1 + i / kiu)
    g = vmax * s / d**2
    return np.stack([s / d, -g, g * s * i / kiu**2], axis=-1)


def _noncompetitive_rate(s, i, vmax, km, ki):
    return vmax * s / ((km + s) * (1 + i / ki))


def _noncompetitive_jac(s, i, vmax, km, ki):
    a = 1 + i / ki
    d = (km + s) * a
    g = vmax * s / d**2
    return np.stack([s / d, -g * a, g * (km + s) * i / ki**2], axis=-1)


MODELS: dict[str, RateLaw] = {
    m.name: m
    for m in (
        RateLaw(
            "none", ("vmax", "km"), _none_rate, _none_jac,
            nests_in=("competitive", "uncompetitive", "noncompetitive", "mixed"),
            equation="v = vmax*S / (km + S)",
        ),
        RateLaw(
            "competitive", ("vmax", "km", "kic"), _competitive_rate, _competitive_jac,
            nests_in=("mixed",),
            equation="v = vmax*S / (km*(1 + I/kic) + S)",
        ),
        RateLaw(
            "uncompetitive", ("vmax", "km", "kiu"), _uncompetitive_rate, _uncompetitive_jac,
            nests_in=("mixed",),
            equation="v = vmax*S / (km + S*(1 + I/kiu))",
        ),
        RateLaw(
            "noncompetitive", ("vmax", "km", "ki"), _noncompetitive_rate, _noncompetitive_jac,
            nests_in=("mixed",),
            equation="v = vmax*S / ((km + S)*(1 + I/ki))",
        ),
        RateLaw(
            "mixed", ("vmax", "km", "kic", "kiu"), _mixed_rate, _mixed_jac,
            nests_in=(),
            equation="v = vmax*S / (km*(1 + I/kic) + S*(1 + I/kiu))",
        ),
    )
}

MODEL_NAMES: tuple[str, ...] = tuple(MODELS)
INHIBITION_MODELS: tuple[str, ...] = tuple(n for n in MODELS if n != "none")


def get_model(name: str) -> RateLaw:
    """Return the rate law called ``name``.

    Raises
    ------
    KeyError
        With the list of known names, when ``name`` is not one of them.
    """
    try:
        return MODELS[name]
    except KeyError:
        raise KeyError(f"unknown mechanism {name!r}; known: {', '.join(MODELS)}") from None


def nested_pairs(names=MODEL_NAMES) -> list[tuple[str, str]]:
    """Every (smaller, larger) pair among ``names`` in which the smaller nests in the larger."""
    return [(a, b) for a in names for b in MODELS[a].nests_in if b in names]
