"""Minimum significant ratio (MSR) of potencies measured more than once.

The MSR is the smallest ratio between two potencies of one compound, each measured in a
separate run, that is statistically significant (Eastwood et al. 2006, J. Biomol. Screen.
11:253–261). With ``s`` the between-run standard deviation of one log10 potency, two
runs differ by ``d`` with SD ``√2·s``, and

    MSR = 10 ** (2·√2·s)

(the factor 2 stands for the two-sided 95 % normal quantile, 1.96; from memory, as in
the paper). Two estimates of ``s`` are reported:

* **pooled** — every compound measured in two or more campaigns: the within-compound
  SD pooled over compounds (one-way analysis of variance, ``Σ(n_i − 1)`` degrees of
  freedom). A campaign-wide shift between runs counts as scatter here.
* **replicate experiment** (exactly two campaigns, the paper's design): the differences
  ``d_i`` of the compounds measured in both, their mean ``d̄`` and SD ``s_d``;
  ``MSR = 10 ** (2·s_d)``, the mean ratio ``MR = 10 ** d̄`` and the limits of agreement
  ``10 ** (d̄ ± 2·s_d)`` (Eastwood et al. 2006, from memory).

pKi and pIC50 are −log10 of the molar constants, so their differences are log10 ratios.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["MSR_Z", "MSREstimate", "MSRResult", "minimum_significant_ratio"]

#: The paper's rounding of the 95 % two-sided normal quantile (1.96).
MSR_Z = 2.0


@dataclass(frozen=True)
class MSREstimate:
    """The MSR of one quantity (pKi or pIC50).

    Attributes
    ----------
    quantity : str
    n_compounds : int
        Compounds measured in two or more campaigns.
    n_measurements : int
    df : int
        Degrees of freedom of the pooled SD.
    sd : float
        Pooled between-run SD of one log10 potency (NaN when ``df`` = 0).
    msr : float
        ``10 ** (2·√2·sd)``.
    mean_ratio, msr_pairs, lower_limit, upper_limit : float
        The replicate-experiment figures (exactly two campaigns; NaN otherwise).
    """

    quantity: str
    n_compounds: int
    n_measurements: int
    df: int
    sd: float
    msr: float
    mean_ratio: float = math.nan
    msr_pairs: float = math.nan
    lower_limit: float = math.nan
    upper_limit: float = math.nan


@dataclass(frozen=True)
class MSRResult:
    """MSR estimates of every quantity; ``.summary()``, ``.to_frame()``, ``_repr_html_()``."""

    estimates: tuple
    campaigns: tuple

    def to_frame(self) -> pd.DataFrame:
        """One row per quantity."""
        return pd.DataFrame([vars(e) for e in self.estimates])

    def summary(self) -> str:
        from ..display.text import text_table

        head = (f"Minimum significant ratio over {len(self.campaigns)} campaigns "
                f"(Eastwood et al. 2006)")
        return head + "\n" + text_table(self.to_frame(), index=False,
                                        float_format=lambda x: f"{x:.3g}")

    def _repr_html_(self) -> str:
        return f"<p>{html.escape(self.summary().splitlines()[0])}</p>" + self.to_frame().to_html(
            index=False, na_rep="-")


def _estimate(table, quantity, compound, campaign) -> MSREstimate:
    data = table[[compound, campaign, quantity]].dropna()
    data = data[np.isfinite(data[quantity].to_numpy(dtype=float))]
    # One value per compound and campaign: a compound twice in one campaign is the mean.
    data = data.groupby([compound, campaign], sort=False)[quantity].mean().reset_index()
    counts = data.groupby(compound)[quantity].transform("size")
    repeated = data[counts >= 2]
    groups = repeated.groupby(compound)[quantity]
    deviations = repeated[quantity] - groups.transform("mean")
    df = int(len(repeated) - groups.ngroups)
    sd = float(np.sqrt(np.sum(deviations.to_numpy() ** 2) / df)) if df > 0 else math.nan
    extra = {}
    runs = list(pd.unique(data[campaign]))
    if len(runs) == 2:
        wide = data.pivot(index=compound, columns=campaign, values=quantity).dropna()
        if len(wide) >= 2:
            d = (wide[runs[0]] - wide[runs[1]]).to_numpy(dtype=float)
            mean_d, sd_d = float(np.mean(d)), float(np.std(d, ddof=1))
            extra = {"mean_ratio": 10 ** mean_d, "msr_pairs": 10 ** (MSR_Z * sd_d),
                     "lower_limit": 10 ** (mean_d - MSR_Z * sd_d),
                     "upper_limit": 10 ** (mean_d + MSR_Z * sd_d)}
    return MSREstimate(quantity, int(groups.ngroups), int(len(repeated)), df, sd,
                       10 ** (MSR_Z * math.sqrt(2.0) * sd), **extra)


def minimum_significant_ratio(table, *, quantities=("pki", "pic50"), compound="compound",
                              campaign="campaign") -> MSRResult:
    """MSR of each quantity from compounds measured in more than one campaign.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per compound and campaign, with the ``quantities`` (log10 potencies,
        NaN where not measured).
    quantities : sequence of str
    compound, campaign : str
        Column names.

    Returns
    -------
    MSRResult
    """
    estimates = tuple(_estimate(table, q, compound, campaign) for q in quantities)
    return MSRResult(estimates, tuple(pd.unique(table[campaign])))
