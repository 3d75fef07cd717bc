"""inhibkin: characterise reversible enzyme inhibitors.

Global fits of every reversible mechanism to substrate × inhibitor grids, model
comparison and a verdict, Ki and pKi with honest intervals, and dose-response potency
converted to Ki. Results are statistical estimates for research triage.
"""

from .compare import VerdictOptions
from .errors import DataError, FitError, InhibkinError, InhibkinWarning, UnitsError
from .fitting import ModelFit, fit_michaelis_menten
from .mechanism import MechanismFit, fit_mechanisms
from .models import MODELS, RateLaw
from .simulate import simulate_grid, standard_design

__version__ = "0.1.0"

__all__ = [
    "DataError",
    "FitError",
    "InhibkinError",
    "InhibkinWarning",
    "MODELS",
    "MechanismFit",
    "ModelFit",
    "RateLaw",
    "UnitsError",
    "VerdictOptions",
    "fit_mechanisms",
    "fit_michaelis_menten",
    "simulate_grid",
    "standard_design",
]
