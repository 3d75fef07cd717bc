"""inhibkin: characterise reversible enzyme inhibitors.

Global fits of every reversible mechanism to substrate × inhibitor grids, model
comparison and a verdict, Ki and pKi with honest intervals, and dose-response potency
converted to Ki. Results are statistical estimates for research triage.
"""

from . import figures
from .batch import Campaign, fit_campaign, simulate_campaign
from .compare import VerdictOptions
from .conversion import cheng_prusoff, ic50_from_ki
from .curve_class import CurveClassRules
from .design import GridPlan, plan_grid
from .engine import fit_logistic_batch, fit_mechanism_arrays, fit_mechanisms_batch
from .errors import DataError, FitError, InhibkinError, InhibkinWarning, UnitsError
from .fitting import ModelFit, fit_michaelis_menten
from .io import read_table, write_table
from .mechanism import MechanismFit, fit_mechanisms
from .models import MODELS, RateLaw
from .morrison import MorrisonFit, fit_morrison
from .plates import PlateQC, plate_qc, z_prime
from .potency import DoseResponseFit, fit_dose_response
from .potency_table import PotencyTable, potency_table
from .rates import InitialRates, initial_rates
from .report import fit_html, report
from .signal import CHROMOPHORES, BeerLambert, StandardCurve, fit_standard_curve
from .simulate import simulate_grid, standard_design
from .time_dependent import (
                             PreincubationFit,
                             TimeDependentFit,
                             fit_preincubation,
                             fit_time_dependent,
)
from .units import from_molar, to_molar

__version__ = "0.1.0"

__all__ = [
    "GridPlan",
    "plan_grid",
    "fit_logistic_batch",
    "fit_mechanism_arrays",
    "fit_mechanisms_batch",
    "figures",
    "fit_html",
    "report",
    "Campaign",
    "fit_campaign",
    "from_molar",
    "read_table",
    "simulate_campaign",
    "to_molar",
    "write_table",
    "BeerLambert",
    "CHROMOPHORES",
    "InitialRates",
    "StandardCurve",
    "fit_standard_curve",
    "initial_rates",
    "DataError",
    "DoseResponseFit",
    "MorrisonFit",
    "PlateQC",
    "PotencyTable",
    "cheng_prusoff",
    "fit_dose_response",
    "fit_morrison",
    "ic50_from_ki",
    "plate_qc",
    "potency_table",
    "CurveClassRules",
    "z_prime",
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
    "PreincubationFit",
    "TimeDependentFit",
    "fit_preincubation",
    "fit_time_dependent",
]
