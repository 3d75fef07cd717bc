"""Reading the rates stage's well flags back: which wells carry a given flag.

A well's ``flags`` are names joined by ``;`` (:data:`inhibkin.rates.initial.FLAGS`);
the grid fits read them back to apply the rates stage's verdict rules
(``time_dependent``, ``product_inhibition``), one parser for both.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["carries_flag"]


def carries_flag(flags, name: str) -> np.ndarray:
    """Whether each well's flags include ``name``.

    Parameters
    ----------
    flags : array-like of str
        Each well's flags as the rates stage writes them (names joined by ``;``; missing
        values are no flags).
    name : str
        The flag asked about.

    Returns
    -------
    numpy.ndarray of bool
    """
    names = pd.Series(np.asarray(flags, dtype=object)).fillna("").astype(str).str.split(";")
    return names.apply(lambda listed: name in (n.strip() for n in listed)).to_numpy(bool)
