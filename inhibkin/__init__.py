"""inhibkin: characterise reversible enzyme inhibitors.

Global fits of every reversible mechanism to substrate × inhibitor grids, model
comparison and a verdict, Ki and pKi with honest intervals, and dose-response potency
converted to Ki. Results are statistical estimates for research triage.

The names below are imported on first use (``ik.fit_campaign`` loads the campaign
modules the first time it is read), so ``import inhibkin`` and ``inhibkin --help`` do
not pay for plotting, lmfit or statsmodels until something needs them.
"""

import importlib
import sys
import types

__version__ = "0.1.0"

# Public name -> the module that defines it (a module exported as itself maps to itself).
_EXPORTS = {
    "figures": "figures",
    "Campaign": "batch",
    "fit_campaign": "batch",
    "simulate_campaign": "batch",
    "VerdictOptions": "compare",
    "cheng_prusoff": "conversion",
    "ic50_from_ki": "conversion",
    "CurveClassRules": "curve_class",
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
    "write_workbook": "excel",
    "ModelFit": "fitting",
    "fit_michaelis_menten": "fitting",
    "read_any_table": "inputs",
    "read_plate_matrix": "inputs",
    "standardise_columns": "inputs",
    "read_table": "io",
    "write_table": "io",
    "MechanismFit": "mechanism",
    "fit_mechanisms": "mechanism",
    "MODELS": "models",
    "RateLaw": "models",
    "MorrisonFit": "morrison",
    "fit_morrison": "morrison",
    "PlateQC": "plates",
    "plate_qc": "plates",
    "z_prime": "plates",
    "DoseResponseFit": "potency",
    "fit_dose_response": "potency",
    "PotencyTable": "potency_table",
    "potency_table": "potency_table",
    "InitialRates": "rates",
    "initial_rates": "rates",
    "fit_html": "report",
    "report": "report",
    "CHROMOPHORES": "signal",
    "BeerLambert": "signal",
    "StandardCurve": "signal",
    "fit_standard_curve": "signal",
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
    "from_molar": "units",
    "to_molar": "units",
}

__all__ = list(_EXPORTS)

# Submodules that share their name with the public function they define: the function is
# what ``inhibkin.report`` names, as it did when everything was imported eagerly.
_FUNCTION_NAMED = frozenset(n for n, m in _EXPORTS.items() if n == m and n != "figures")


class _Package(types.ModuleType):
    """The package module; keeps the import system from binding a submodule over the
    public function of the same name (it sets each submodule as a package attribute)."""

    def __setattr__(self, name, value):
        if name in _FUNCTION_NAMED and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package


def __getattr__(name):
    try:
        module_name = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    module = importlib.import_module(f".{module_name}", __name__)
    value = module if name == module_name and name == "figures" else getattr(module, name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
