"""Time-dependent inhibition as data: the progress curve and the kobs-against-[I] schemes.

Progress curve (Morrison & Walsh 1988, Adv. Enzymol. 61:201; Copeland, *Evaluation of
Enzyme Inhibitors in Drug Discovery*): when an inhibitor binds or inactivates slowly on the
time scale of the read, product follows

    P(t) = P0 + vs·t + (vi − vs)·(1 − e^(−kobs·t))/kobs,

from the initial rate vi (slope at t = 0) to the steady-state rate vs (slope as t → ∞);
vs = 0 for irreversible inactivation. The equation assumes substrate and inhibitor are not
depleted over the read; :mod:`.depletion` carries the substrate a well consumes.

kobs against the inhibitor concentration [I] tells the schemes apart:

* ``one_step``  E + I ⇌ EI in one slow step: kobs = koff + kon·[I] (a line);
* ``two_step``  E + I ⇌ EI fast (KI), then EI → E–I (kinact, irreversible) or
  EI ⇌ EI* (k5, k6, slow reversible): kobs = k6 + k5·[I]/(KI + [I]) (a hyperbola;
  k5 is kinact and k6 = 0 for a covalent inhibitor).

``one_step`` is the limit of ``two_step`` as KI → ∞ with k5/KI = kon held, so the two are
a nested pair (one parameter apart) and the extra sum-of-squares F-test compares them, as
the mechanism verdict does. Each entry below is the single place a scheme is defined.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

__all__ = ["KobsScheme", "SCHEMES", "progress_curve", "kobs_one_step", "kobs_two_step"]


def progress_curve(t, p0, vi, vs, kobs):
    """Product at time t of a slow-onset inhibited reaction (module formula).

    Parameters
    ----------
    t : array_like
        Time since the reaction started (any unit; kobs in its inverse).
    p0 : array_like
        Product (or signal) at t = 0.
    vi, vs : array_like
        Initial and steady-state rates (signal per time unit).
    kobs : array_like
        Apparent first-order rate constant of the onset (per time unit, ≥ 0); kobs = 0
        gives the straight line p0 + vi·t.

    Returns
    -------
    numpy.ndarray
        Broadcast over every argument.
    """
    t, kobs = np.asarray(t, dtype=float), np.asarray(kobs, dtype=float)
    return p0 + vs * t + (vi - vs) * onset(t, kobs)


def onset(t, kobs):
    """(1 − e^(−kobs·t))/kobs, and its limit t at kobs = 0, without cancellation."""
    t, kobs = np.broadcast_arrays(np.asarray(t, dtype=float), np.asarray(kobs, dtype=float))
    small = np.abs(kobs * t) < 1e-8
    with np.errstate(divide="ignore", invalid="ignore"):
        exact = -np.expm1(-kobs * t) / kobs
    return np.where(small, t * (1.0 - 0.5 * kobs * t), exact)


def kobs_one_step(inhibitor, kon, koff=0.0):
    """kobs = koff + kon·[I] (kon per concentration per time, koff per time)."""
    return koff + kon * np.asarray(inhibitor, dtype=float)


def kobs_two_step(inhibitor, k5, ki, k6=0.0):
    """kobs = k6 + k5·[I]/(KI + [I]) (k5 = kinact, k6 per time; KI in [I]'s unit)."""
    i = np.asarray(inhibitor, dtype=float)
    return k6 + k5 * i / (ki + i)


@dataclass(frozen=True)
class KobsScheme:
    """One scheme of kobs against [I].

    Attributes
    ----------
    name : str
    params : tuple of str
        Parameter names in the order ``function`` takes them after [I].
    roles : dict
        Parameter name -> what it is, with its unit.
    function : callable
        ``function(inhibitor, *params) -> kobs``.
    off_rate : str
        The parameter that is zero for an irreversible inhibitor (held at 0 then).
    nests_in : tuple of str
        Schemes this one is a limit of (one parameter fewer).
    """

    name: str
    params: tuple[str, ...]
    roles: dict = field(repr=False)
    function: Callable = field(repr=False)
    off_rate: str = ""
    nests_in: tuple[str, ...] = ()


SCHEMES = {
    "one_step": KobsScheme(
        "one_step", ("kon", "koff"),
        {"kon": "association rate constant (per [I] unit per time unit)",
         "koff": "dissociation rate constant (per time unit)"},
        kobs_one_step, off_rate="koff", nests_in=("two_step",)),
    "two_step": KobsScheme(
        "two_step", ("k5", "ki", "k6"),
        {"k5": "isomerisation or inactivation rate constant, kinact when irreversible "
               "(per time unit)",
         "ki": "dissociation constant of the first, rapid complex ([I] unit)",
         "k6": "reverse isomerisation rate constant, 0 when irreversible (per time unit)"},
        kobs_two_step, off_rate="k6"),
}
