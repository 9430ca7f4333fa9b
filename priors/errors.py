"""Exceptions and warnings raised by :mod:`priors`.

The tree::

    PriorsError
    ├── DataError (ValueError)                 input data cannot be used as given
    │   ├── MissingValuesError                 NaN or inf inside the estimation window
    │   ├── TooFewObservationsError            not enough rows for the lags and regressors
    │   ├── ConstantSeriesError                a series never changes
    │   ├── ExplosiveDataError                 a series grows by orders of magnitude
    │   ├── NonPositiveValuesError             log transform of values <= 0 (or <= -1 for log1p)
    │   ├── TimeIndexError                     duplicate, unsorted or irregular timestamps
    │   │   └── DateRangeError                 dates (or forecast dates) outside 1678-2261
    │   ├── NonNumericError                    a column that is not numbers
    │   ├── DuplicateNameError                 two series with the same name
    │   └── ExogenousError                     exogenous regressors missing or misaligned
    ├── SpecificationError (ValueError)        settings that do not fit together
    ├── NotPositiveDefiniteError (LinAlgError) a matrix that must be SPD is not
    ├── NotFittedError (ValueError, AttributeError)
    └── WorkCancelled                          stopped at a checkpoint (priors.cancellation)

    ConvergenceWarning (UserWarning)           an optimiser stopped at a bound or failed
    ShortHistoryWarning (UserWarning)          few rows for the coefficients of the lags
    NegativeValuesWarning (UserWarning)        a few negative values in counts (demand?)

Every message says what was found and what to change. The service maps each class to
an RFC 9457 problem response in one place (``service/errors.py``).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "ConstantSeriesError",
    "ConvergenceWarning",
    "DataError",
    "DateRangeError",
    "DuplicateNameError",
    "ExogenousError",
    "ExplosiveDataError",
    "MissingValuesError",
    "NegativeValuesWarning",
    "NonNumericError",
    "NonPositiveValuesError",
    "NotFittedError",
    "NotPositiveDefiniteError",
    "PriorsError",
    "ShortHistoryWarning",
    "SpecificationError",
    "TimeIndexError",
    "TooFewObservationsError",
    "WorkCancelled",
]


class PriorsError(Exception):
    """Base class of every exception raised on purpose by :mod:`priors`."""


class DataError(PriorsError, ValueError):
    """The input data cannot be used as given."""


class MissingValuesError(DataError):
    """NaN or infinite values inside the estimation window."""


class TooFewObservationsError(DataError):
    """Too few observations for the requested lags and regressors."""


class ConstantSeriesError(DataError):
    """A series is constant over the estimation window, so its scale is zero."""


class ExplosiveDataError(DataError):
    """A series grows by orders of magnitude over the sample (e.g. exponentially), so a
    VAR in its units cannot be estimated in double precision; model its log instead."""


class NonPositiveValuesError(DataError):
    """A log-type transform was asked for a series with values outside its domain."""


class TimeIndexError(DataError):
    """Timestamps are duplicated, unsorted or not evenly spaced, or their frequency is
    unknown or finer than a day. ``argument``, when known, names the input to change
    (e.g. "frequency")."""

    def __init__(self, message: str, argument: str | None = None) -> None:
        super().__init__(message)
        self.argument = argument


class DateRangeError(TimeIndexError):
    """Dates of the data, or of the forecast periods, outside the supported calendar
    (:data:`priors.calendar.FIRST_DATE` to :data:`priors.calendar.LAST_DATE`).

    ``argument`` says which input to change: ``"dates"`` (the data's own dates) or
    ``"horizon"`` (the forecast would run past the last supported date).
    """

    def __init__(self, message: str, argument: str = "dates") -> None:
        super().__init__(message, argument)


class NonNumericError(DataError):
    """A column holds something other than numbers."""


class DuplicateNameError(DataError):
    """Two series (or regressors) share a name."""


class ExogenousError(DataError):
    """Exogenous regressors are missing, misaligned or lack future values."""


class SpecificationError(PriorsError, ValueError):
    """Model settings that are invalid or do not fit together."""


class NotPositiveDefiniteError(PriorsError, np.linalg.LinAlgError):
    """A matrix that must be symmetric positive definite is not."""


class NotFittedError(PriorsError, ValueError, AttributeError):
    """A method that needs a fitted model was called before ``fit``."""


class WorkCancelled(PriorsError):
    """A computation stopped at a checkpoint because its caller gave up on it (request
    timeout, time limit, cancellation); see :mod:`priors.cancellation`. Not an input
    error: nothing about the data or settings is wrong."""


class ConvergenceWarning(UserWarning):
    """An optimiser stopped at a bound of its search range or did not converge."""


class ShortHistoryWarning(UserWarning):
    """The estimation sample is short for the number of coefficients of the chosen lags,
    so the prior, not the data, decides most of them."""


class NegativeValuesWarning(UserWarning):
    """A series of whole numbers that is almost never negative has a few negative
    values: if it is demand, likely a data error (e.g. returns booked as negative
    sales). The model uses the values as given."""
