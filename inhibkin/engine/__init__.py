"""Batched fitting engine: many independent problems of one model solved together.

A vectorised Levenberg–Marquardt solver (:mod:`.lm`) over padded numpy arrays, used for
the five mechanism models (:mod:`.mechanisms`) and the four-parameter logistic
(:mod:`.dose_response`) at screening scale, optionally in chunks on a dask cluster
(:mod:`.chunks`). The lmfit path (:mod:`inhibkin.mechanism.one_model`) stays the reference: the
engine uses its starting values, bounds, weighting and verdict rules, is tested against
it, and hands it the fits it cannot converge.
"""

from .chunks import DEFAULT_CHUNK_SIZE
from .dose_response import LogisticBatch, fit_logistic_batch
from .lm import LMResult, solve
from .mechanisms import (
    MechanismBatch,
    ModelBatch,
    fit_mechanism_arrays,
    fit_mechanisms_batch,
    pad,
)

__all__ = [
    "DEFAULT_CHUNK_SIZE",
    "LMResult",
    "LogisticBatch",
    "MechanismBatch",
    "ModelBatch",
    "fit_logistic_batch",
    "fit_mechanism_arrays",
    "fit_mechanisms_batch",
    "pad",
    "solve",
]
