"""Mass-action simulator of reversible inhibition read as absorbance plates, for tests and
benchmarks.

Independent of inhibkin's rate laws: the species E, S, I, ES, EI, ESI and P follow the
elementary steps

    E + S ⇌ ES (k1, k_1),  ES → E + P (kcat),
    E + I ⇌ EI (kon, kon·kic),  ES + I ⇌ ESI (kon, kon·kiu),

and, when asked, the ways the chemistry leaves the textbook laws:

    ES + S ⇌ SES (kon, kon·ksi), dead end (substrate inhibition),
    ESI → EI + P (beta·kcat) (partial inhibition: ESI still turns over),
    E + P ⇌ EP (kon, kon·kp) (product inhibition, competitive with S),

with [E] free to be comparable to the inhibitor (tight binding: nothing assumes
E0 ≪ I; every species is conserved by the equations themselves). Everything is
integrated with scipy.integrate.solve_ivp (LSODA, stiff; rtol 1e-10). EI and ESI are
dead ends, so under the quasi-steady state the rate is the mixed law with
Km = (k_1 + kcat)/k1 and the two dissociation constants kic and kiu (textbook steady-state
result for dead-end inhibitors, e.g. Cornish-Bowden, Fundamentals of Enzyme Kinetics;
`from memory`); kiu = inf is competitive, kic = inf uncompetitive, kic = kiu
noncompetitive. Concentrations µM, times s.

A plate is one compound on an 8 × 6 substrate × inhibitor grid in duplicate (96 wells):
absorbance A = A0 + ε·l·P read every ``READ_INTERVAL`` s, with Gaussian read noise of
``READ_CV`` (3 %) of each read (photometric noise proportional to the signal; `common
practice`) and pipetting scatter of the enzyme, ``PIPETTING_CV`` per well, applied as a
time scaling of the progress curve (exact under the quasi-steady state, E0 ≪ S, Km).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np
from scipy.integrate import solve_ivp

#: The standard grid: substrate 0.2–10 × Km, inhibitor 0 and five levels (µM).
SUBSTRATE = (2.0, 3.5, 5.0, 7.5, 10.0, 20.0, 50.0, 100.0)
INHIBITOR = (0.0, 0.5, 1.0, 2.0, 4.0, 8.0)
REPLICATES = 2
READ_INTERVAL = 20.0
N_READS = 31
#: Baseline absorbance (plate + buffer) and ε·l of the product (AU per µM).
BASELINE = 0.05
EPSILON_PATH = 0.02
READ_CV = 0.03
PIPETTING_CV = 0.03


@dataclass(frozen=True)
class Mechanism:
    """Rate constants of one compound (µM⁻¹ s⁻¹ bimolecular, s⁻¹ otherwise, µM)."""

    kic: float = np.inf
    kiu: float = np.inf
    k1: float = 100.0
    k_1: float = 900.0
    kcat: float = 100.0
    kon: float = 100.0
    enzyme: float = 2e-5
    ksi: float = np.inf
    beta: float = 0.0
    kp: float = np.inf

    @property
    def km(self) -> float:
        """Michaelis constant (k_1 + kcat)/k1, µM."""
        return (self.k_1 + self.kcat) / self.k1

    @property
    def vmax(self) -> float:
        """kcat·E0, µM/s."""
        return self.kcat * self.enzyme


def _rhs(_t, y, p, on_c, on_u, on_s, on_p):
    e, s, i, es, ei, esi, product, ses, ep = y
    bind_s = p.k1 * e * s - p.k_1 * es
    turn = p.kcat * es
    bind_c = on_c * (e * i - p.kic * ei)
    bind_u = on_u * (es * i - p.kiu * esi)
    dead = on_s * (es * s - p.ksi * ses)
    leak = p.beta * p.kcat * esi
    bind_p = on_p * (e * product - p.kp * ep)
    return [-bind_s + turn - bind_c - bind_p, -bind_s - dead, -bind_c - bind_u,
            bind_s - turn - bind_u - dead, bind_c + leak, bind_u - leak, turn + leak - bind_p,
            dead, bind_p]


@cache
def product_curve(mechanism: Mechanism, substrate: float, inhibitor: float):
    """Dense solution P(t) (µM) of one well, solved once per argument set."""
    # A dissociation constant of inf is a step that does not happen.
    steps = ("kic", "kiu", "ksi", "kp")
    on = [0.0 if np.isinf(getattr(mechanism, k)) else mechanism.kon for k in steps]
    p = Mechanism(**{**mechanism.__dict__, **{k: 0.0 if np.isinf(getattr(mechanism, k))
                                              else getattr(mechanism, k) for k in steps}})
    y0 = [mechanism.enzyme, substrate, inhibitor, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0]
    end = 1.5 * READ_INTERVAL * (N_READS - 1)
    sol = solve_ivp(_rhs, (0.0, end), y0, method="LSODA", dense_output=True, rtol=1e-10,
                    atol=1e-16, args=(p, *on))
    if not sol.success:
        raise RuntimeError(sol.message)
    return sol.sol


def plate(mechanism: Mechanism, seed: int, *, compound="CPD", substrate=SUBSTRATE,
          inhibitor=INHIBITOR, read_cv=READ_CV, curve=None, with_scale=False):
    """Reads and plate map of one simulated plate (``substrate`` × ``inhibitor`` levels,
    µM, in duplicate, at most 48 cells: one 96-well plate; the standard grid by default;
    ``read_cv`` the read noise, default ``READ_CV``).

    ``curve(s, i)`` gives a well's product P(t) (µM) in place of the mass-action ODE's
    (a benchmark reads the closed form through it); with ``with_scale`` the plate map
    carries each well's pipetting scale of the enzyme (``enzyme_scale``: the well's
    rates are that multiple of the unscaled curve's), for studies that need the true
    initial rate of each well.

    Returns
    -------
    reads : pandas.DataFrame
        plate, well, time (s), signal (absorbance).
    plate_map : pandas.DataFrame
        plate, well, compound, substrate (µM), inhibitor (µM), role.
    """
    import pandas as pd

    rng = np.random.default_rng(seed)
    times = READ_INTERVAL * np.arange(N_READS)
    reads, wells = [], []
    k = 0
    for _ in range(REPLICATES):
        for s in substrate:
            for i in inhibitor:
                well = f"{'ABCDEFGH'[k // 12]}{k % 12 + 1:02d}"
                k += 1
                scale = max(1.0 + PIPETTING_CV * rng.standard_normal(), 0.5)
                product = (product_curve(mechanism, s, i)(scale * times)[6]
                           if curve is None else curve(s, i)(scale * times))
                signal = BASELINE + EPSILON_PATH * product
                signal = signal + read_cv * signal * rng.standard_normal(N_READS)
                reads.append(pd.DataFrame({"plate": "P1", "well": well, "time": times,
                                           "signal": signal}))
                wells.append({"plate": "P1", "well": well, "compound": compound,
                              "substrate_uM": s, "inhibitor_uM": i, "role": "sample",
                              **({"enzyme_scale": scale} if with_scale else {})})
    return pd.concat(reads, ignore_index=True), pd.DataFrame(wells)
