"""Data from known mechanisms, for tests, planning and the demo."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .core.models import MODELS, get_model
from .errors import DataError

__all__ = ["simulate_grid", "standard_design"]


def standard_design(km, ki, *, n_substrate=8, n_inhibitor=6):
    """A standard grid: S from 0.2 to 10 × km (log-spaced), I from 0 to 4 × Ki.

    Parameters
    ----------
    km, ki : float
        Expected km and inhibition constant (units of S and I respectively).
    n_substrate, n_inhibitor : int
        Number of substrate levels and of inhibitor levels (including I = 0).

    Returns
    -------
    s, i : numpy.ndarray
        The substrate and inhibitor levels.
    """
    s = km * np.geomspace(0.2, 10.0, n_substrate)
    i = ki * np.linspace(0.0, 4.0, n_inhibitor)
    return s, i


def _true_params(law, vmax, km, kic, kiu):
    values = {"vmax": vmax, "km": km, "kic": kic, "kiu": kiu}
    for source, targets in law.ties:
        # A tied constant (noncompetitive's ki is kic = kiu) takes whichever is given.
        values[source] = next((values[x] for x in targets if values[x] is not None), None)
    missing = [p for p in law.param_names if values.get(p) is None]
    if missing:
        raise DataError(f"{law.name} needs {', '.join(missing)}")
    return [float(values[p]) for p in law.param_names]


def simulate_grid(mechanism, *, vmax, km, kic=None, kiu=None, s=None, i=None, replicates=2,
                  cv=0.0, sd=0.0, seed=None) -> pd.DataFrame:
    """Initial rates on a substrate × inhibitor grid from a known mechanism.

    Parameters
    ----------
    mechanism : str
        One of :data:`inhibkin.core.models.MODELS`. ``noncompetitive`` takes its single
        constant from ``kic`` (or ``kiu``).
    vmax, km : float
        Maximum rate (rate units) and Michaelis constant (substrate units).
    kic, kiu : float, optional
        Inhibition constants (inhibitor units), as the mechanism needs them.
    s, i : array_like, optional
        Substrate and inhibitor levels; default :func:`standard_design` with the
        mechanism's constant (or km) as the scale.
    replicates : int
        Points per grid cell.
    cv : float
        Coefficient of variation of proportional Gaussian noise (0.05 = 5 %).
    sd : float
        Standard deviation of additive Gaussian noise (rate units).
    seed : int or numpy.random.Generator, optional
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    pandas.DataFrame
        Columns ``substrate``, ``inhibitor``, ``replicate``, ``rate`` and ``true_rate``;
        one row per simulated point.
    """
    law = get_model(mechanism)
    params = _true_params(law, vmax, km, kic, kiu)
    if s is None or i is None:
        scale = next((x for x in (kic, kiu) if x is not None), km)
        s_default, i_default = standard_design(km, scale)
        s = s_default if s is None else s
        i = i_default if i is None else i
    s = np.asarray(s, dtype=float)
    i = np.asarray(i, dtype=float)
    grid_s, grid_i, grid_r = np.meshgrid(s, i, np.arange(replicates), indexing="ij")
    grid_s, grid_i, grid_r = grid_s.ravel(), grid_i.ravel(), grid_r.ravel()
    truth = MODELS[law.name].rate(grid_s, grid_i, *params)
    rng = np.random.default_rng(seed)
    noise = truth * cv * rng.standard_normal(truth.size) + sd * rng.standard_normal(truth.size)
    return pd.DataFrame({"substrate": grid_s, "inhibitor": grid_i, "replicate": grid_r,
                         "rate": truth + noise, "true_rate": truth})
