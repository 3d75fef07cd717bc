"""Shared fixtures: data files and seeded generators."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

DATA = Path(__file__).parent / "data"


@pytest.fixture
def misra1d() -> pd.DataFrame:
    return pd.read_csv(DATA / "misra1d.csv")


@pytest.fixture
def puromycin() -> pd.DataFrame:
    return pd.read_csv(DATA / "puromycin_treated.csv")


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20261201)
