"""Fanfold's model: data -> Minnesota prior -> NIW posterior -> predictive paths.

Pure numerics over numpy arrays (plus pandas at the data edge); no web, database or
environment access. The estimator facade is :class:`FanfoldVAR`.
"""

from ._kernels import warm_up as warm_up_kernels
from .calendar import Calendar
from .cancellation import CancelToken, cancel_scope, checkpoint
from .conjugate import NIWPosterior, flat_posterior, log_marginal_likelihood, posterior
from .convergence import ConvergenceReport, chain_diagnostics
from .data import (
    Design,
    Deterministics,
    RaggedEdge,
    SeriesData,
    build_design,
    future_exogenous_rows,
    load_series,
    split_ragged_edge,
)
from .errors import (
    ConstantSeriesError,
    ConvergenceWarning,
    DataError,
    DateRangeError,
    DuplicateNameError,
    ExogenousError,
    ExplosiveDataError,
    MissingValuesError,
    NegativeValuesWarning,
    NonNumericError,
    NonPositiveValuesError,
    NotFittedError,
    NotPositiveDefiniteError,
    PriorsError,
    ShortHistoryWarning,
    SpecificationError,
    TimeIndexError,
    TooFewObservationsError,
    WorkCancelled,
)
from .forecast import Forecast, fan_bands
from .gibbs import (
    GibbsDraws,
    GibbsSettings,
    IndependentPrior,
    independent_minnesota_prior,
    run_chains,
)
from .inventory import (
    ReplenishmentAdvice,
    exceedance_probabilities,
    expected_shortage,
    fill_rate_reorder_point,
    lead_time_covariance,
    reorder_point,
    replenishment_advice,
    window_totals,
)
from .irf import (
    ResponseBands,
    cumulative,
    impulse_responses,
    ma_coefficients,
    response_units,
    summarize_draws,
    variance_decomposition,
)
from .model import FanfoldVAR, LagChoice
from .predictive import companion_spectral_radius, simulate_paths, simulate_paths_from_draws
from .sampling import Draws, sample_posterior
from .scenarios import Condition, Scenario, conditional_paths, model_unit_conditions
from .shrinkage import MinnesotaHyper, NIWPrior, minnesota_prior
from .transforms import TRANSFORMS
from .tuning import TightnessProfile, TuningResult, tune_hyperparameters

__all__ = [
    "TRANSFORMS",
    "Calendar",
    "CancelToken",
    "Condition",
    "ConstantSeriesError",
    "ConvergenceReport",
    "ConvergenceWarning",
    "DataError",
    "DateRangeError",
    "Design",
    "Deterministics",
    "Draws",
    "DuplicateNameError",
    "ExogenousError",
    "ExplosiveDataError",
    "FanfoldVAR",
    "Forecast",
    "GibbsDraws",
    "GibbsSettings",
    "IndependentPrior",
    "LagChoice",
    "MinnesotaHyper",
    "MissingValuesError",
    "NIWPosterior",
    "NIWPrior",
    "NegativeValuesWarning",
    "NonNumericError",
    "NonPositiveValuesError",
    "NotFittedError",
    "NotPositiveDefiniteError",
    "PriorsError",
    "RaggedEdge",
    "ReplenishmentAdvice",
    "ResponseBands",
    "Scenario",
    "SeriesData",
    "ShortHistoryWarning",
    "SpecificationError",
    "TightnessProfile",
    "TimeIndexError",
    "TooFewObservationsError",
    "TuningResult",
    "WorkCancelled",
    "build_design",
    "cancel_scope",
    "chain_diagnostics",
    "checkpoint",
    "companion_spectral_radius",
    "conditional_paths",
    "cumulative",
    "exceedance_probabilities",
    "expected_shortage",
    "fan_bands",
    "fill_rate_reorder_point",
    "flat_posterior",
    "future_exogenous_rows",
    "impulse_responses",
    "independent_minnesota_prior",
    "lead_time_covariance",
    "load_series",
    "log_marginal_likelihood",
    "ma_coefficients",
    "minnesota_prior",
    "model_unit_conditions",
    "posterior",
    "reorder_point",
    "replenishment_advice",
    "response_units",
    "run_chains",
    "sample_posterior",
    "simulate_paths",
    "simulate_paths_from_draws",
    "split_ragged_edge",
    "summarize_draws",
    "tune_hyperparameters",
    "variance_decomposition",
    "warm_up_kernels",
    "window_totals",
]
