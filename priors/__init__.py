"""Fanfold's model: data -> Minnesota prior -> NIW posterior -> predictive paths.

Pure numerics over numpy arrays (plus pandas at the data edge); no web, database or
environment access. The estimator facade is :class:`FanfoldVAR`.
"""

from .calendar import Calendar
from .conjugate import NIWPosterior, flat_posterior, log_marginal_likelihood, posterior
from .data import (
    Design,
    Deterministics,
    SeriesData,
    build_design,
    future_exogenous_rows,
    load_series,
)
from .errors import (
    ConstantSeriesError,
    ConvergenceWarning,
    DataError,
    DuplicateNameError,
    ExogenousError,
    MissingValuesError,
    NonNumericError,
    NonPositiveValuesError,
    NotFittedError,
    NotPositiveDefiniteError,
    PriorsError,
    SpecificationError,
    TimeIndexError,
    TooFewObservationsError,
)
from .forecast import Forecast, fan_bands
from .model import FanfoldVAR, LagChoice
from .predictive import companion_spectral_radius, simulate_paths, simulate_paths_from_draws
from .sampling import Draws, sample_posterior
from .shrinkage import MinnesotaHyper, NIWPrior, minnesota_prior
from .transforms import TRANSFORMS
from .tuning import TightnessProfile, TuningResult, tune_hyperparameters

__all__ = [
    "TRANSFORMS",
    "Calendar",
    "ConstantSeriesError",
    "ConvergenceWarning",
    "DataError",
    "Design",
    "Deterministics",
    "Draws",
    "DuplicateNameError",
    "ExogenousError",
    "FanfoldVAR",
    "Forecast",
    "LagChoice",
    "MinnesotaHyper",
    "MissingValuesError",
    "NIWPosterior",
    "NIWPrior",
    "NonNumericError",
    "NonPositiveValuesError",
    "NotFittedError",
    "NotPositiveDefiniteError",
    "PriorsError",
    "SeriesData",
    "SpecificationError",
    "TightnessProfile",
    "TimeIndexError",
    "TooFewObservationsError",
    "TuningResult",
    "build_design",
    "companion_spectral_radius",
    "fan_bands",
    "flat_posterior",
    "future_exogenous_rows",
    "load_series",
    "log_marginal_likelihood",
    "minnesota_prior",
    "posterior",
    "sample_posterior",
    "simulate_paths",
    "simulate_paths_from_draws",
    "tune_hyperparameters",
]
