"""Data from known mechanisms, for tests, planning and the demo."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .core.models import INHIBITION_MODELS, MODELS, get_model
from .errors import DataError
from .units import from_molar, to_molar

__all__ = ["simulate_grid", "standard_design", "simulate_campaign", "simulate_dose_campaign"]


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


def simulate_campaign(n_compounds, *, seed, cv=0.05, km_uM=20.0, vmax=100.0,
                      pki_range=(5.0, 9.0),
                      mechanisms=INHIBITION_MODELS,
                      design_error=0.5, n_substrate=6, n_inhibitor=5, replicates=2):
    """A campaign of compounds of known mechanism and Ki against one enzyme.

    Each compound gets a mechanism (cycled through ``mechanisms``), a pKi drawn
    uniformly from ``pki_range``, and a grid whose inhibitor levels run from 0 to 4 ×
    an *expected* Ki that is off from the true one by up to ``design_error`` log units
    (the assay is planned from an earlier, rougher estimate, not from the truth).
    Mixed inhibitors get alpha = kiu/kic of 10**±(0.5…1); their pKi is that of the
    tighter constant.

    Parameters
    ----------
    n_compounds : int
    seed : int
        Seed of ``numpy.random.default_rng``.
    cv : float
        Coefficient of variation of the proportional noise on the rates.
    km_uM : float
        Michaelis constant of the enzyme (µM).
    vmax : float
        Maximum rate (any rate unit).
    pki_range : (float, float)
    mechanisms : sequence of str
    design_error : float
        Largest log10 error of the expected Ki that sets each inhibitor range.
    n_substrate, n_inhibitor, replicates : int
        Grid size per compound.

    Returns
    -------
    table : pandas.DataFrame
        compound, substrate_uM, inhibitor_nM, rate.
    truth : pandas.DataFrame
        compound, mechanism, kic_M, kiu_M, ki_M, pki (the true values).
    """
    rng = np.random.default_rng(seed)
    frames, truth = [], []
    s_uM = km_uM * np.geomspace(0.2, 10.0, n_substrate)
    width = len(str(n_compounds))
    for k in range(n_compounds):
        name = f"CPD-{k + 1:0{width}d}"
        mechanism = mechanisms[k % len(mechanisms)]
        pki = rng.uniform(*pki_range)
        ki_nM = from_molar(10.0 ** -pki, "nM")
        kic = kiu = ki_nM
        if mechanism == "mixed":
            ratio = 10.0 ** rng.uniform(0.5, 1.0)
            if rng.random() < 0.5:
                kiu = ki_nM * ratio
            else:
                kic = ki_nM * ratio
        expected = ki_nM * 10.0 ** rng.uniform(-design_error, design_error)
        i_nM = expected * np.linspace(0.0, 4.0, n_inhibitor)
        grid = simulate_grid(mechanism, vmax=vmax, km=km_uM, kic=kic, kiu=kiu, s=s_uM, i=i_nM,
                             replicates=replicates, cv=cv, seed=rng)
        frames.append(pd.DataFrame({"compound": name, "substrate_uM": grid["substrate"],
                                    "inhibitor_nM": grid["inhibitor"], "rate": grid["rate"]}))
        truth.append({"compound": name, "mechanism": mechanism,
                      "kic_M": to_molar(kic, "nM") if mechanism != "uncompetitive" else np.inf,
                      "kiu_M": to_molar(kiu, "nM") if mechanism != "competitive" else np.inf,
                      "ki_M": 10.0 ** -pki, "pki": pki})
    return pd.concat(frames, ignore_index=True), pd.DataFrame(truth)


def simulate_dose_campaign(compounds, *, seed, cv=0.05, km_uM=20.0, s_uM=20.0,
                           pki_range=(5.0, 9.0), inactive_fraction=0.1, design_error=0.5,
                           n_points=10, replicates=2, per_plate=8, n_controls=4,
                           signal_max=1000.0, signal_min=50.0):
    """Dose-response plates of competitive inhibitors of known Ki, with plate controls.

    Each active compound gets a pKi drawn uniformly from ``pki_range`` and a curve of
    ``n_points`` concentrations (a 900-fold range, in ``replicates``) centred on an
    *expected* IC50 off from the true one by up to ``design_error`` log units; an
    inactive one (a share ``inactive_fraction``) has its Ki 1000 times above the top
    concentration, so its wells are noise around full activity. The true IC50 is
    Ki·(1 + S/Km), the competitive case of Cheng & Prusoff (1973, Biochem. Pharmacol.
    22:3099). Signals run from ``signal_min`` (no activity) to ``signal_max`` (full
    activity), with Gaussian noise of ``cv`` times that window; every plate of
    ``per_plate`` compounds has ``n_controls`` 'max' and 'min' wells.

    Parameters
    ----------
    compounds : int or sequence of str
        How many compounds (named ``DR-0001``…), or their names.
    seed : int
        Seed of ``numpy.random.default_rng``.
    cv : float
        Noise as a fraction of the control window.
    km_uM, s_uM : float
        Michaelis constant and assay substrate concentration (µM).
    pki_range : (float, float)
    inactive_fraction : float
    design_error : float
    n_points, replicates, per_plate, n_controls : int
    signal_max, signal_min : float

    Returns
    -------
    plates : pandas.DataFrame
        compound (empty for controls), plate, role, inhibitor_nM, signal, substrate_uM.
    truth : pandas.DataFrame
        compound, active, ki_M, pki (NaN pKi for inactive compounds).
    """
    rng = np.random.default_rng(seed)
    if isinstance(compounds, int):
        width = len(str(compounds))
        compounds = [f"DR-{k + 1:0{width}d}" for k in range(compounds)]
    window = signal_max - signal_min
    samples, truth = [], []
    for k, name in enumerate(compounds):
        plate = f"P{k // per_plate + 1}"
        pki = rng.uniform(*pki_range)
        active = rng.random() >= inactive_fraction
        ic50_nM = from_molar(10.0 ** -pki, "nM") * (1.0 + s_uM / km_uM)
        guess = ic50_nM * 10.0 ** rng.uniform(-design_error, design_error)
        conc = np.repeat(guess * np.geomspace(1 / 30, 30, n_points), replicates)
        if not active:
            ic50_nM = 1000.0 * conc.max()
        activity = 1.0 / (1.0 + conc / ic50_nM)
        signal = signal_min + window * activity + cv * window * rng.standard_normal(conc.size)
        samples.append(pd.DataFrame({"compound": name, "plate": plate, "role": "sample",
                                     "inhibitor_nM": conc, "signal": signal,
                                     "substrate_uM": s_uM}))
        truth.append({"compound": name, "active": active,
                      "ki_M": to_molar(ic50_nM / (1.0 + s_uM / km_uM), "nM"),
                      "pki": pki if active else np.nan})
    controls = []
    for plate in pd.unique(pd.concat(samples)["plate"]) if samples else []:
        for role, level in (("max", signal_max), ("min", signal_min)):
            controls.append(pd.DataFrame({
                "compound": None, "plate": plate, "role": role, "inhibitor_nM": 0.0,
                "signal": level + cv * window * rng.standard_normal(n_controls),
                "substrate_uM": s_uM}))
    columns = ["compound", "plate", "role", "inhibitor_nM", "signal", "substrate_uM"]
    plates = pd.concat(samples + controls, ignore_index=True) if samples else \
        pd.DataFrame(columns=columns)
    return plates[columns], pd.DataFrame(truth, columns=["compound", "active", "ki_M", "pki"])
