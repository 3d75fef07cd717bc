"""Mass-action simulator of slow-binding and covalent inhibition, for tests and benchmarks.

Independent of inhibkin's rate laws: the species E, S, ES, I, EI, EX (EX = the covalent
adduct E–I, or the isomerised complex EI*) and P follow the elementary steps

    E + S ⇌ ES (k1, k_1),  ES → E + P (kcat),
    E + I ⇌ EI (kon, koff), EI → EX (k5) and EX → EI (k6),

integrated with scipy.integrate.solve_ivp (stiff method, tight tolerances). k5 = k6 = 0
gives one-step binding (slow when kon and koff are small, rapid equilibrium when large);
k6 = 0 with k5 > 0 a covalent (irreversible) inhibitor; both > 0 two-step slow binding.
The inhibitor competes with substrate for free enzyme. Concentrations µM, times s.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np
from scipy.integrate import solve_ivp


@dataclass(frozen=True)
class Scheme:
    """Rate constants (µM⁻¹ s⁻¹ for bimolecular steps, s⁻¹ for the others)."""

    kon: float
    koff: float
    k5: float = 0.0
    k6: float = 0.0
    k1: float = 100.0
    k_1: float = 900.0
    kcat: float = 100.0
    enzyme: float = 5e-6

    @property
    def km(self) -> float:
        """Michaelis constant (k_1 + kcat)/k1, µM."""
        return (self.k_1 + self.kcat) / self.k1

    @property
    def ki(self) -> float:
        """Dissociation constant of the first complex, koff/kon, µM."""
        return self.koff / self.kon


def _rhs(_t, y, p):
    e, s, es, i, ei, ex, _ = y
    bind_s = p.k1 * e * s - p.k_1 * es
    turn = p.kcat * es
    bind_i = p.kon * e * i - p.koff * ei
    step = p.k5 * ei - p.k6 * ex
    return [-bind_s + turn - bind_i, -bind_s, bind_s - turn, -bind_i, bind_i - step, step,
            turn]


@cache
def product_curve(scheme: Scheme, substrate: float, inhibitor: float,
                  times: tuple[float, ...]) -> np.ndarray:
    """Product (µM) at ``times`` (s) after mixing enzyme into substrate and inhibitor.

    Solved once per argument set (cached for the test session).
    """
    y0 = [scheme.enzyme, substrate, 0.0, inhibitor, 0.0, 0.0, 0.0]
    sol = solve_ivp(_rhs, (0.0, times[-1]), y0, method="LSODA", t_eval=np.asarray(times),
                    rtol=1e-10, atol=1e-16, args=(scheme,))
    if not sol.success:
        raise RuntimeError(sol.message)
    return sol.y[6]


def plate_reads(scheme, substrate, inhibitors, times, *, noise_sd, seed, replicates=1):
    """Tidy reads (well, time, signal, substrate, inhibitor) of one plate, with noise.

    The signal is the product in µM plus Gaussian read noise of ``noise_sd`` µM.
    """
    import pandas as pd

    rng = np.random.default_rng(seed)
    rows = []
    times = tuple(float(x) for x in times)
    for r in range(replicates):
        for j, inhibitor in enumerate(inhibitors):
            product = product_curve(scheme, float(substrate), float(inhibitor), times)
            signal = product + rng.normal(0.0, noise_sd, len(times))
            rows.append(pd.DataFrame({"well": f"W{r}-{j:02d}", "time": times,
                                      "signal": signal, "substrate": substrate,
                                      "inhibitor": inhibitor}))
    return pd.concat(rows, ignore_index=True)


@cache
def preincubated(scheme: Scheme, inhibitor: float, time: float) -> tuple[float, float]:
    """Enzyme after pre-incubation with inhibitor alone for ``time`` s.

    Returns
    -------
    free, active : float
        Fractions of the enzyme free (E) and not yet in the final complex (E + EI): the
        activity read in the inhibitor's presence, and after a jump dilution.
    """
    y0 = [scheme.enzyme, 0.0, 0.0, inhibitor, 0.0, 0.0, 0.0]
    sol = solve_ivp(_rhs, (0.0, time), y0, method="LSODA", rtol=1e-10, atol=1e-18,
                    args=(scheme,))
    e, _, _, _, ei, _, _ = sol.y[:, -1]
    return e / scheme.enzyme, (e + ei) / scheme.enzyme
