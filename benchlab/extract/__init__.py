"""Parameter extraction: fit diode-connected sweeps with the shared models, thresholds, flags.

Public API::

    from benchlab.extract import fit_sweep, fit_batch, FitResult, FITTER_VERSION, load_sweep_csv

Everything here is pure (numbers in, frozen dataclasses out); no instrument is touched.
See docs/extraction.md for the methods and their sources.
"""

from benchlab.extract.fit import DEFAULT_CC_CURRENT, MODEL_CHOICES, fit_batch, fit_sweep
from benchlab.extract.result import ALL_FLAGS, FITTER_VERSION, FitResult
from benchlab.extract.sweepdata import Sweep, load_sweep_csv, validate_points
from benchlab.extract.thresholds import gm_over_id_from_data, gm_over_id_from_params, operating_curve

__all__ = [
    "ALL_FLAGS", "DEFAULT_CC_CURRENT", "FITTER_VERSION", "FitResult", "MODEL_CHOICES", "Sweep", "fit_batch",
    "fit_sweep", "gm_over_id_from_data", "gm_over_id_from_params", "load_sweep_csv", "operating_curve",
    "validate_points",
]
