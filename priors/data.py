"""From user data to the design matrices of a VAR(p).

:func:`load_series` validates a DataFrame (regular DatetimeIndex) or a plain array and
applies the per-series transforms. :func:`build_design` makes ``Y`` (T, n) and ``X``
(T, k) with the deterministic terms first, then exogenous regressors, then lags 1..p.
:func:`future_exogenous_rows` gives the deterministic/exogenous part of ``x`` for the
forecast steps.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ._types import FloatArray
from .calendar import Calendar, calendar_from_index, plain_calendar
from .errors import (
    ConstantSeriesError,
    DuplicateNameError,
    ExogenousError,
    ExplosiveDataError,
    MissingValuesError,
    NonNumericError,
    SpecificationError,
    TooFewObservationsError,
)
from .transforms import DIFFERENCING, check_transforms, forward

__all__ = [
    "EXPLOSIVE_DECADES",
    "Deterministics",
    "Design",
    "RaggedEdge",
    "SeriesData",
    "build_design",
    "count_columns",
    "check_history",
    "explosive_message",
    "future_exogenous_rows",
    "growth_decades",
    "load_series",
    "negative_values_message",
    "season_columns",
    "split_ragged_edge",
]

#: steady growth over the sample, in orders of magnitude, that :func:`load_series`
#: refuses as explosive (see :func:`explosive_message`)
EXPLOSIVE_DECADES = 6.0


@dataclass(frozen=True)
class Deterministics:
    """Deterministic regressors: constant, linear trend and seasonal dummies."""

    constant: bool = True
    trend: bool = False
    seasonal: bool = False


@dataclass(frozen=True)
class SeriesData:
    """Validated series in model units, with their calendar.

    Attributes
    ----------
    names : the n series names.
    levels : (T0, n) the data in the user's units, as given.
    values : (T, n) the data in model units (T = T0 - 1 if any series is differenced).
    calendar : dates of the rows of ``values``.
    transforms : one transform name per series.
    exog : (T, q) exogenous regressors aligned with ``values`` (q may be 0).
    exog_names : the q regressor names.
    """

    names: tuple[str, ...]
    levels: FloatArray
    values: FloatArray
    calendar: Calendar
    transforms: tuple[str, ...]
    exog: FloatArray
    exog_names: tuple[str, ...]

    @property
    def n(self) -> int:
        return len(self.names)

    @property
    def nobs(self) -> int:
        return self.values.shape[0]


@dataclass(frozen=True)
class Design:
    """Regression form of a VAR(p): ``Y = X @ B + E``.

    ``Y`` is (T, n); ``X`` is (T, k) with k = m + n*p, the m deterministic and exogenous
    columns first; ``labels`` name the k columns (``const``, ``trend``, ``month=3``,
    ``tyres[t-1]``...).
    """

    Y: FloatArray
    X: FloatArray
    lags: int
    n_det: int
    labels: tuple[str, ...]
    names: tuple[str, ...]

    @property
    def n(self) -> int:
        return self.Y.shape[1]

    @property
    def k(self) -> int:
        return self.X.shape[1]

    @property
    def nobs(self) -> int:
        return self.Y.shape[0]


def _row_label(index: pd.Index | None, row: int, first: int = 1) -> str:
    """Where row ``row`` (0-based) of the data is, for a message: its date and its data
    row counted from 1 (the first row of data, not a header, is data row 1), or the data
    row alone without dates. ``first`` is the data row of row 0 when rows were dropped
    before it (e.g. to differencing)."""
    where = f"data row {row + first}"
    if isinstance(index, pd.DatetimeIndex):
        return f"{index[row].date()} ({where})"
    return where


def _as_frame(data: pd.DataFrame | FloatArray, names: Sequence[str] | None) -> pd.DataFrame:
    if isinstance(data, pd.DataFrame):
        frame = data
        if (not isinstance(frame.index, pd.DatetimeIndex) and frame.shape[1]
                and pd.api.types.is_datetime64_any_dtype(frame.dtypes.iloc[0])):
            frame = frame.set_index(frame.columns[0])
        if names is not None:
            if len(names) != frame.shape[1]:
                raise SpecificationError(f"got {len(names)} names for {frame.shape[1]} columns")
            frame = frame.set_axis(list(names), axis=1)
    elif isinstance(data, pd.Series):
        frame = data.to_frame()
    else:
        arr = np.asarray(data)
        if arr.ndim == 1:
            arr = arr[:, None]
        if arr.ndim != 2:
            raise SpecificationError(f"data must be 2-D of shape (T, n); got shape {arr.shape}")
        cols = list(names) if names is not None else [f"y{j + 1}" for j in range(arr.shape[1])]
        if len(cols) != arr.shape[1]:
            raise SpecificationError(f"got {len(cols)} names for {arr.shape[1]} columns")
        frame = pd.DataFrame(arr, columns=cols)
    return frame


def _numeric(frame: pd.DataFrame, what: str) -> FloatArray:
    names = [str(c) for c in frame.columns]
    dup = sorted({c for c in names if names.count(c) > 1})
    if dup:
        raise DuplicateNameError(f"{what} name {dup[0]!r} is used more than once; rename one")
    plain = frame.to_numpy()  # one numpy dtype: pandas mixes bool and numbers as object
    if plain.dtype.kind in "fiu":
        return plain.astype(np.float64, copy=False)
    for j, (col, dtype) in enumerate(frame.dtypes.items()):
        if not (pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)):
            column = frame.iloc[:, j]
            row = _first_non_number(column)
            if row is None:  # numbers stored as text or objects: show one
                found = (f"its values are stored as {dtype}, not as numbers (e.g. "
                         f"{column.dropna().iloc[:1].tolist()})")
            else:
                found = (f"the first cell that is not a number is {column.iloc[row]!r} at "
                         f"{_row_label(frame.index, row)}")
            raise NonNumericError(
                f"{what} {str(col)!r} is not numeric (dtype {dtype}); {found}; give numbers "
                "only (leave a missing value empty), with dates in the index or the first "
                "column"
            )
    return frame.to_numpy(dtype=np.float64, na_value=np.nan)


def _first_non_number(column: pd.Series) -> int | None:
    """Position of the first present cell that is not a number (every present cell of
    a boolean column), or None."""
    present = column.notna()
    if pd.api.types.is_bool_dtype(column.dtype):
        bad = present
    else:
        bad = present & pd.to_numeric(column, errors="coerce").isna()
    rows = np.flatnonzero(bad.to_numpy(dtype=bool))
    return int(rows[0]) if rows.size else None


def _check_finite(values: FloatArray, names: Sequence[str], calendar: Calendar, what: str,
                  first: int = 1) -> None:
    """Refuse NaN and inf, naming the first one's series, date and data row (``first``:
    the data row of ``values[0]``)."""
    bad = ~np.isfinite(values)
    if bad.any():
        row, col = (int(i) for i in np.argwhere(bad)[0])
        kind = ("a missing value (an empty cell, NaN or null)" if np.isnan(values[row, col])
                else "an infinite value")
        raise MissingValuesError(
            f"{what} {names[col]!r} has {kind} at {_row_label(calendar.index, row, first)}, "
            f"inside the estimation window ({int(bad.sum())} such values in all); fill them "
            "or cut the data to a window without them"
        )


def _edge_rows(T: int) -> int:
    """Rows b = max(2, T // 10) in each of the first, middle and last stretches."""
    return max(2, T // 10)


def growth_decades(values: FloatArray) -> FloatArray:
    """Orders of magnitude by which each series grows steadily over the sample, (n,).

    Parameters
    ----------
    values : (T, n) data in model units.

    Returns
    -------
    (n,) ``log10(last / first)``, where ``first``, ``middle`` and ``last`` are the
    largest absolute values in the first, middle and last b = max(2, T // 10) rows;
    0 where the growth is not steady. Steady means that each half of the sample carries
    at least a quarter of the total rise: first -> middle and middle -> last (an
    exponential carries half each; a single level shift, e.g. a change of units, all
    of it in one half). 0 too when the first rows are all zero or T < 3 b.
    """
    values = np.asarray(values, dtype=np.float64)
    T, n = values.shape
    b = _edge_rows(T)
    if T < 3 * b:
        return np.zeros(n)
    mid = T // 2 - b // 2
    size = np.abs(values)
    first, middle, last = (size[rows].max(axis=0) for rows in
                           (slice(0, b), slice(mid, mid + b), slice(T - b, T)))
    with np.errstate(divide="ignore", invalid="ignore"):
        rise1 = np.log10(middle) - np.log10(first)
        rise2 = np.log10(last) - np.log10(middle)
    total = rise1 + rise2
    steady = (first > 0) & np.isfinite(total) & (np.minimum(rise1, rise2) >= 0.25 * total)
    return np.where(steady & (total > 0), total, 0.0)


def explosive_message(
    values: FloatArray, names: Sequence[str], *, decades: float = EXPLOSIVE_DECADES
) -> str | None:
    """What to tell the user when a series explodes, else None.

    Parameters
    ----------
    values : (T, n) data in model units.
    names : the n series names.
    decades : smallest steady growth, in orders of magnitude, that counts as explosive
        (:func:`growth_decades`). The default, a millionfold, is about where the fits of
        an explosive process with additive shocks break down: squared values then span
        12 orders of magnitude, the relative tolerance (1e-12) below which a residual
        variance counts as zero. Growth with proportional noise survives the numerics
        longer (measured: up to ~13 orders), but the early rows no longer count at all.

    Returns
    -------
    The message for the fastest-growing series over ``decades`` (its name, first and
    last magnitudes and growth factor per period, and to model its log), or None.
    """
    values = np.asarray(values, dtype=np.float64)
    grow = growth_decades(values)
    if not grow.size or grow.max() < decades:
        return None
    j = int(np.argmax(grow))
    T = values.shape[0]
    b = _edge_rows(T)
    size = np.abs(values[:, j])
    i0, i1 = int(np.argmax(size[:b])), T - b + int(np.argmax(size[T - b:]))
    per_period = 10.0 ** ((np.log10(size[i1]) - np.log10(size[i0])) / (i1 - i0))
    name = names[j]
    return (
        f"series {name!r} explodes: its largest absolute value is {size[i0]:.3g} in the "
        f"first {b} rows and {size[i1]:.3g} in the last {b} ({grow[j]:.0f} orders of "
        f"magnitude, about x{per_period:.3g} per period), so a VAR in these units is "
        "dominated by its last few values and cannot be estimated reliably; model its "
        f"logarithm, transforms={{{name!r}: 'log'}} (or 'logdiff' for growth rates; both "
        "need positive values), or check the data's units"
    )


def load_series(
    data: pd.DataFrame | FloatArray,
    *,
    transforms: str | Sequence[str] | Mapping[str, str] | None = None,
    exog: pd.DataFrame | FloatArray | None = None,
    names: Sequence[str] | None = None,
    period: int | None = None,
) -> SeriesData:
    """Validate the series and put them in model units.

    Parameters
    ----------
    data : DataFrame of shape (T0, n) with a regular DatetimeIndex, or array (T0, n)
    transforms : one name for all series, one per series, or a mapping name -> transform
        (series not named stay ``"none"``). Names: none, log, log1p, diff, logdiff.
    exog : optional (T0, q) exogenous regressors on the same rows as ``data``.
    names : series names for plain arrays (default y1..yn).
    period : seasonal period for plain arrays (ignored with dates).
    """
    frame = _as_frame(data, names)
    if frame.shape[1] == 0:
        raise SpecificationError("data has no series columns")
    levels = _numeric(frame, "series")
    series_names = tuple(str(c) for c in frame.columns)
    if isinstance(frame.index, pd.DatetimeIndex):
        calendar = calendar_from_index(frame.index)
    else:
        calendar = plain_calendar(period)
    if isinstance(transforms, Mapping):
        unknown = sorted(set(transforms) - set(series_names))
        if unknown:
            raise SpecificationError(
                f"transform given for unknown series {unknown[0]!r}; series are "
                f"{', '.join(series_names)}"
            )
        transforms = [transforms.get(nm, "none") for nm in series_names]
    tr = check_transforms(transforms, len(series_names))
    _check_finite(levels, series_names, calendar, "series")
    values = forward(levels, tr, series_names)
    drop = levels.shape[0] - values.shape[0]
    calendar = calendar.drop_first(drop)
    # relative tolerance: differences of e.g. 0.1 * t are constant only up to rounding
    flat = (np.ptp(values, axis=0) <= 1e-10 * np.abs(values).max(axis=0) if values.shape[0]
            else np.zeros(values.shape[1], dtype=bool))
    if flat.any():
        j = int(np.flatnonzero(flat)[0])
        unit = "its differences are" if tr[j] in DIFFERENCING else "it is"
        raise ConstantSeriesError(
            f"series {series_names[j]!r} has no variation ({unit} constant at "
            f"{values[0, j]:g}); drop it or use a longer window"
        )
    explosive = explosive_message(values, series_names)
    if explosive:
        raise ExplosiveDataError(explosive)
    ex, ex_names = _load_exog(exog, frame, series_names)
    ex = ex[drop:]
    _check_finite(ex, ex_names, calendar, "exogenous regressor", first=drop + 1)
    return SeriesData(series_names, levels, values, calendar, tr, ex, ex_names)


@dataclass(frozen=True)
class RaggedEdge:
    """The incomplete last periods of the data: ``values`` (r, n) in the user's units with
    NaN where a series is not yet known; ``exog`` (r, q) their exogenous values."""

    values: FloatArray
    exog: FloatArray | None


def split_ragged_edge(
    data: pd.DataFrame | FloatArray,
    exog: pd.DataFrame | FloatArray | None = None,
    names: Sequence[str] | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame | FloatArray | None, RaggedEdge | None]:
    """Cut the trailing rows where some (not all) series are missing.

    Returns the complete part of the data and of ``exog``, and the cut rows (None when
    the last row is complete). A trailing row with no value at all is refused: it carries
    no information, so it should be dropped. Missing values before the last complete row
    are left in place for :func:`load_series` to report.
    """
    frame = _as_frame(data, names)
    try:
        arr = frame.to_numpy(dtype=np.float64, na_value=np.nan)
    except (TypeError, ValueError):
        return frame, exog, None  # load_series names the non-numeric column
    complete = np.all(np.isfinite(arr), axis=1)
    if arr.shape[0] == 0 or complete[-1]:
        return frame, exog, None
    if isinstance(frame.index, pd.DatetimeIndex):
        calendar_from_index(frame.index)  # the incomplete rows' dates must be regular too
    last = int(np.flatnonzero(complete)[-1]) if complete.any() else -1
    tail = arr[last + 1 :]
    empty = ~np.any(np.isfinite(tail), axis=1)
    if empty.any():
        row = last + 1 + int(np.flatnonzero(empty)[0])
        raise MissingValuesError(
            f"{_row_label(frame.index, row)} has no value for any series; drop empty "
            "trailing rows (only the last periods may be incomplete, and each needs at least "
            "one value)")
    if np.any(np.isinf(tail)):
        raise MissingValuesError("the incomplete last periods contain an infinite value")
    ex_tail = None
    if exog is not None:
        if isinstance(exog, pd.DataFrame | pd.Series):
            ex_frame = exog.to_frame() if isinstance(exog, pd.Series) else exog
            ex_tail = ex_frame.iloc[last + 1 :].to_numpy(dtype=np.float64, na_value=np.nan)
            exog = ex_frame.iloc[: last + 1]
        else:
            ex = np.asarray(exog, dtype=np.float64)
            ex = ex[:, None] if ex.ndim == 1 else ex
            ex_tail, exog = ex[last + 1 :], ex[: last + 1]
        if not np.all(np.isfinite(ex_tail)):
            raise ExogenousError("exogenous regressors must be known in the incomplete last "
                                 "periods too")
    return frame.iloc[: last + 1], exog, RaggedEdge(tail, ex_tail)


def _load_exog(
    exog: pd.DataFrame | FloatArray | None, frame: pd.DataFrame, series_names: tuple[str, ...]
) -> tuple[FloatArray, tuple[str, ...]]:
    if exog is None:
        return np.empty((frame.shape[0], 0)), ()
    ex_frame = _as_frame(exog, None)
    if not isinstance(exog, pd.DataFrame | pd.Series):
        ex_frame.columns = [f"x{j + 1}" for j in range(ex_frame.shape[1])]
    if ex_frame.shape[0] != frame.shape[0]:
        raise ExogenousError(
            f"exogenous regressors have {ex_frame.shape[0]} rows but the series have "
            f"{frame.shape[0]}; give one row per period of the data"
        )
    if isinstance(ex_frame.index, pd.DatetimeIndex) and isinstance(frame.index, pd.DatetimeIndex):
        if not ex_frame.index.equals(frame.index):
            raise ExogenousError("exogenous regressors are not on the same dates as the series")
    names = tuple(str(c) for c in ex_frame.columns)
    clash = sorted(set(names) & set(series_names))
    if clash:
        raise DuplicateNameError(f"exogenous regressor {clash[0]!r} has a series' name")
    return _numeric(ex_frame, "exogenous regressor"), names


def _deterministic_block(
    series: SeriesData, det: Deterministics, rows: np.ndarray, dates: pd.DatetimeIndex | None
) -> tuple[FloatArray, list[str]]:
    cols: list[FloatArray] = []
    labels: list[str] = []
    if det.constant:
        cols.append(np.ones(len(rows)))
        labels.append("const")
    if det.trend:
        cols.append(rows.astype(np.float64) + 1.0)
        labels.append("trend")
    if det.seasonal:
        season_labels = series.calendar.season_labels()
        codes = series.calendar.season_codes(rows, dates)
        for s, lab in enumerate(season_labels, start=1):
            cols.append((codes == s).astype(np.float64))
            labels.append(lab)
    if not cols:
        return np.empty((len(rows), 0)), labels
    return np.column_stack(cols), labels


def count_columns(levels: FloatArray) -> np.ndarray:
    """Which of the (T, n) series are counts: every finite value a whole number >= 0
    (units sold, items shipped), shape (n,)."""
    values = np.asarray(levels, dtype=np.float64)
    finite = np.isfinite(values)
    whole = (values >= 0) & (values == np.round(values))
    return np.all(whole | ~finite, axis=0) & np.any(finite, axis=0)


#: label prefixes of the seasonal dummies (see :meth:`Calendar.season_labels`)
SEASON_PREFIXES = ("month=", "quarter=", "weekday=", "season=")


def season_columns(design: Design) -> np.ndarray:
    """Boolean mask over the m deterministic/exogenous columns: the seasonal dummies."""
    return np.array([lab.startswith(SEASON_PREFIXES) for lab in design.labels[: design.n_det]],
                    dtype=bool)


def build_design(
    series: SeriesData, lags: int, det: Deterministics, *, start: int | None = None
) -> Design:
    """Stack the regressors of a VAR(``lags``).

    Parameters
    ----------
    start : first row of ``series.values`` used as a left-hand-side observation;
        default ``lags``. Comparing lag orders on a common sample uses ``start=p_max``.
    """
    if int(lags) != lags or lags < 1:
        raise SpecificationError(f"lags must be an integer >= 1; got {lags!r}")
    lags = int(lags)
    start = lags if start is None else int(start)
    if start < lags:
        raise SpecificationError(f"start ({start}) must be at least lags ({lags})")
    T_all, n = series.values.shape
    rows = np.arange(start, T_all)
    dates = None if series.calendar.index is None else series.calendar.index[start:]
    D, det_labels = _deterministic_block(series, det, rows, dates)
    m = D.shape[1] + series.exog.shape[1]
    k = m + n * lags
    T = len(rows)
    need = max(m + lags + 2, 3)
    if T < need:
        lost = series.levels.shape[0] - T_all
        dropped = f" and {lost} row lost to differencing" if lost else ""
        raise TooFewObservationsError(
            f"{series.levels.shape[0]} observations leave {T} rows for estimation after "
            f"{start} presample row(s){dropped}; each series' own AR({lags}) with {m} "
            f"deterministic/exogenous term(s) needs at least {need}; use fewer lags "
            "or more data"
        )
    V = series.values
    lag_blocks = [V[start - lag : T_all - lag] for lag in range(1, lags + 1)]
    X = np.column_stack([D, series.exog[start:], *lag_blocks]) if k else np.empty((T, 0))
    labels = (
        *det_labels,
        *series.exog_names,
        *(f"{nm}[t-{lag}]" for lag in range(1, lags + 1) for nm in series.names),
    )
    return Design(V[start:].copy(), X, lags, m, labels, series.names)


def _history_need(n: int, lags: int, m: int) -> int:
    """Rows that :func:`check_history` asks for: max(k + 1, 2 n p), k = m + n p."""
    return max(m + n * lags + 1, 2 * n * lags)


def check_history(design: Design) -> str | None:
    """The warning text when the sample is short for the lag order, else None.

    Rule (common practice, a rule of thumb, not a result from a paper): an equation of
    a VAR(p) has k = m + n p coefficients (m deterministic/exogenous terms, n series);
    least squares needs more rows than k, and the data inform the n p lag coefficients
    of an equation only with at least about two rows each. So warn when the estimation
    rows T (``design.nobs``) are fewer than max(k + 1, 2 n p). The model still fits:
    the prior's shrinkage then carries most of the weight. Examples that pass: 120
    monthly rows, 5 series, 1-2 lags; 120 rows, 3 series, 4 lags (116 >= 24); 200
    quarterly rows, 7 series, 8 lags (192 >= 112); 76 quarterly rows, 5 series, 4 lags,
    constant and 3 seasonal dummies (72 >= 40). 10 rows of 3 series with 3 lags warn
    (7 < 18).

    Parameters
    ----------
    design : Y (T, n) and X (T, k) of the fitted VAR, with ``design.lags`` presample
        rows before the T estimation rows (:func:`build_design` with its default start).
    """
    T, n, p, k, m = design.nobs, design.n, design.lags, design.k, design.n_det
    need = _history_need(n, p, m)
    if T >= need:
        return None
    total = T + p  # observations in model units, presample included
    fit = [q for q in range(p - 1, 0, -1) if total - q >= _history_need(n, q, m)]
    options = [f"fewer lags (lags={fit[0]} meets the rule)" if fit else "fewer series"]
    if fit:
        options.append("fewer series")
    if m + 1 > n * p:  # the deterministic/exogenous terms are what make k + 1 bind
        options.append("fewer deterministic/exogenous terms")
    options.append(f"{need - T} more period(s) of history")
    return (
        f"short history for {p} lag(s): {T} estimation rows for {k} coefficients per "
        f"equation ({n} series x {p} lag(s) + {m} deterministic/exogenous term(s)); a "
        f"common rule of thumb asks for at least {need} rows (more than the coefficients, "
        "and two per lag coefficient), so the prior's shrinkage, not the data, carries "
        f"most of the weight. Use {', '.join(options[:-1])} or {options[-1]}"
    )


#: share of a series' values that must be >= 0 for its negative values to look like
#: errors in demand data (:func:`negative_values_message`)
MOSTLY_NONNEGATIVE = 0.9


def negative_values_message(series: SeriesData) -> str | None:
    """What to tell the user when a series looks like demand with a few negative values.

    A series "looks like demand" when all its values are whole numbers (counts of
    units) with a positive median, and at least :data:`MOSTLY_NONNEGATIVE` of them are
    >= 0. A few negative values in such a series are usually a data error, e.g. returns
    booked as negative sales. Series with fractional values are not checked: negative
    values are ordinary in many of them (changes, balances, temperatures). Returns the
    message for the first such series (its name, how many negative values, the first
    one's value, date and data row), or None.
    """
    levels = series.levels
    lost = levels.shape[0] - series.nobs  # the calendar starts after rows lost to differencing
    for j, name in enumerate(series.names):
        y = levels[:, j]
        negative = y < 0
        if (not negative.any() or np.mean(~negative) < MOSTLY_NONNEGATIVE
                or not np.all(y == np.round(y)) or np.median(y) <= 0):
            continue
        row = int(np.flatnonzero(negative)[0])
        where = (f"data row {row + 1}" if row < lost
                 else _row_label(series.calendar.index, row - lost, first=lost + 1))
        share = np.floor(100 * np.mean(~negative))
        return (f"series {name!r} has {int(negative.sum())} negative value(s), the first "
                f"{y[row]:g} at {where}, though {share:.0f}% "
                "of its values are >= 0; in demand data a negative value is usually an error "
                "(e.g. returns booked as negative sales): check the data. The model uses "
                "the values as given")
    return None


def future_exogenous_rows(
    series: SeriesData,
    det: Deterministics,
    horizon: int,
    exog_future: pd.DataFrame | FloatArray | None = None,
) -> FloatArray:
    """The deterministic and exogenous part of x for steps 1..horizon, shape (horizon, m)."""
    T_all = series.nobs
    rows = np.arange(T_all, T_all + horizon)
    dates = series.calendar.future(horizon)
    D, _ = _deterministic_block(series, det, rows, dates)
    q = len(series.exog_names)
    if q == 0:
        if exog_future is not None and np.asarray(exog_future).size:
            raise ExogenousError("future exogenous values given, but the model has none")
        return D
    if exog_future is None:
        raise ExogenousError(
            f"the model uses exogenous regressors ({', '.join(series.exog_names)}); give "
            f"their future values for all {horizon} forecast steps"
        )
    if isinstance(exog_future, pd.DataFrame):
        missing = [c for c in series.exog_names if c not in exog_future.columns]
        if missing:
            raise ExogenousError(f"future values of exogenous regressor {missing[0]!r} missing")
        fut = exog_future[list(series.exog_names)].to_numpy(dtype=np.float64, na_value=np.nan)
    else:
        fut = np.asarray(exog_future, dtype=np.float64)
        if fut.ndim == 1 and q == 1:
            fut = fut[:, None]
        if fut.ndim != 2 or fut.shape[1] != q:
            raise ExogenousError(
                f"future exogenous values must have shape (horizon, {q}), one column per "
                f"regressor ({', '.join(series.exog_names)}); got shape {fut.shape}"
            )
    if fut.shape[0] < horizon:
        raise ExogenousError(
            f"exogenous regressors need future values for {horizon} steps; got {fut.shape[0]}"
        )
    fut = fut[:horizon]
    if not np.all(np.isfinite(fut)):
        raise ExogenousError("future exogenous values contain NaN or inf")
    return np.column_stack([D, fut]) if D.size else fut
