"""inhibkin: characterise reversible enzyme inhibitors.

Global fits of every reversible mechanism to substrate × inhibitor grids, model
comparison and a verdict, Ki and pKi with honest intervals, and dose-response potency
converted to Ki. Results are statistical estimates for research triage.

The names below are imported on first use (``ik.fit_campaign`` loads the campaign
modules the first time it is read), so ``import inhibkin`` and ``inhibkin --help`` do
not pay for plotting, lmfit or statsmodels until something needs them.
"""

import importlib

__version__ = "0.1.0"

# Public name -> the module that defines it.
_EXPORTS = {
    "figures": "display.figures",
    "Campaign": "campaign.result",
    "fit_campaign": "campaign.fit",
    "simulate_campaign": "simulate",
    "VerdictOptions": "core.compare",
    "cheng_prusoff": "potency.conversion",
    "ic50_from_ki": "potency.conversion",
    "CurveClassRules": "core.curve_class",
    "GridPlan": "design",
    "plan_grid": "design",
    "fit_logistic_batch": "engine",
    "fit_mechanism_arrays": "engine",
    "fit_mechanisms_batch": "engine",
    "DataError": "errors",
    "FitError": "errors",
    "InhibkinError": "errors",
    "InhibkinWarning": "errors",
    "UnitsError": "errors",
    "OptionError": "errors",
    "write_workbook": "inputs.excel",
    "ModelFit": "mechanism.one_model",
    "fit_michaelis_menten": "mechanism.one_model",
    "read_any_table": "inputs",
    "read_plate_matrix": "inputs",
    "standardise_columns": "inputs",
    "read_table": "inputs.io",
    "write_table": "inputs.io",
    "MechanismFit": "mechanism.fit",
    "fit_mechanisms": "mechanism.fit",
    "ProgressCurveFit": "mechanism.progress_curves",
    "fit_progress_curves": "mechanism.progress_curves",
    "MODELS": "core.models",
    "RateLaw": "core.models",
    "MorrisonFit": "potency.morrison",
    "fit_morrison": "potency.morrison",
    "PlateQC": "rates.plates",
    "plate_qc": "rates.plates",
    "z_prime": "rates.plates",
    "DoseResponseFit": "potency.curve",
    "fit_dose_response": "potency.curve",
    "PotencyTable": "potency.table",
    "potency_table": "potency.table",
    "InitialRates": "rates.initial",
    "initial_rates": "rates.initial",
    "product_curves": "rates.initial",
    "fit_html": "reporting.report",
    "report": "reporting.report",
    "CHROMOPHORES": "rates.signal",
    "BeerLambert": "rates.signal",
    "StandardCurve": "rates.signal",
    "fit_standard_curve": "rates.signal",
    "simulate_grid": "simulate",
    "standard_design": "simulate",
    "ResultStore": "store",
    "minimum_significant_ratio": "store",
    "write_campaign": "store",
    "PreincubationFit": "time_dependent",
    "TimeDependentFit": "time_dependent",
    "fit_preincubation": "time_dependent",
    "fit_time_dependent": "time_dependent",
    "rank_time_dependent": "time_dependent",
    "fit_time_dependent_ranking": "time_dependent",
    "TimeDependentRanking": "time_dependent",
    "from_molar": "units",
    "to_molar": "units",
}

__all__ = list(_EXPORTS)

# Modules exported as themselves (``ik.figures``); every other entry names a function or class.
_MODULE_EXPORTS = frozenset({"figures"})


def __getattr__(name):
    try:
        module_name = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    module = importlib.import_module(f".{module_name}", __name__)
    value = module if name in _MODULE_EXPORTS else getattr(module, name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
