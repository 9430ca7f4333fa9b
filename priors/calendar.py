"""Time-index handling: frequency detection, seasonal codes and future dates.

Supported dates run from :data:`FIRST_DATE` to :data:`LAST_DATE` (whole years inside
pandas' nanosecond timestamps, 1677-09-21 to 2262-04-11), for the data and for every
forecast period; anything outside is refused with :class:`DateRangeError`.

Nothing here changes process-wide state (pandas options, warning filters): calendars are
built on request paths, in several threads at once.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from pandas.tseries import frequencies, offsets

from ._types import IntArray
from .errors import DateRangeError, SpecificationError, TimeIndexError

__all__ = ["FIRST_DATE", "LAST_DATE", "Calendar", "calendar_from_index", "check_date_range",
           "check_frequency", "plain_calendar", "regular_dates"]

#: first and last supported date (data and forecast periods)
FIRST_DATE = pd.Timestamp("1678-01-01")
LAST_DATE = pd.Timestamp("2261-12-31 23:59:59")
_RANGE = f"{FIRST_DATE.date()} to {LAST_DATE.date()}"


def check_date_range(first: object, last: object, *, argument: str = "dates") -> None:
    """Raise :class:`DateRangeError` unless ``first`` .. ``last`` lie inside the supported
    dates. ``argument`` ("dates" or "horizon") is carried on the error."""
    for when, label in ((first, "first"), (last, "last")):
        try:
            stamp = pd.Timestamp(when)  # type: ignore[arg-type]
        except (ValueError, OverflowError) as exc:
            raise DateRangeError(f"the {label} date {when} cannot be read as a date; "
                                 f"dates must lie from {_RANGE}", argument) from exc
        if not FIRST_DATE <= stamp <= LAST_DATE:
            what = ("the forecast would run to" if argument == "horizon"
                    else f"the {label} date is")
            advice = ("shorten the horizon" if argument == "horizon"
                      else "move the dates into that range")
            day = f"{stamp.year:04d}-{stamp.month:02d}-{stamp.day:02d}"
            raise DateRangeError(f"{what} {day}, outside the supported dates {_RANGE}; "
                                 f"{advice}", argument)

_WEEKDAYS = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")
_MONTH_START = offsets.MonthBegin()


_DAY_NS = 86_400_000_000_000


def check_frequency(freq: str | offsets.BaseOffset) -> offsets.BaseOffset:
    """The offset of ``freq``; :class:`TimeIndexError` if unknown or finer than a day.

    Periods are whole days or longer (D, B, W, MS, QS, YS...): dates are kept and shown
    without a time of day, so hourly or minute data would collapse onto repeated dates.
    """
    try:
        offset = frequencies.to_offset(freq)
    except ValueError as exc:
        raise TimeIndexError(f"unknown frequency {freq!r}; use a pandas frequency such as "
                             "MS, QS, W or D", "frequency") from exc
    if isinstance(offset, offsets.Tick) and offset.nanos < _DAY_NS:
        raise TimeIndexError(
            f"frequency {offset.freqstr!r} is finer than a day; Fanfold works with daily "
            "or longer periods (D, B, W, MS, QS, YS): add the values up per day first",
            "frequency")
    return offset


def regular_dates(start: object, periods: int, freq: str,
                  name: str | None = None) -> pd.DatetimeIndex:
    """``pd.date_range(start, periods=periods, freq=freq, name=name)``, the same index.

    Month starts ("MS", the usual layout of demand data) are built from numpy months:
    0.02 ms instead of pandas' 0.7 ms for 120 dates.

    Raises
    ------
    DateRangeError
        ``start`` or the last date outside :data:`FIRST_DATE` .. :data:`LAST_DATE`.
    TimeIndexError
        An unknown frequency, or one finer than a day (:func:`check_frequency`).
    """
    check_frequency(freq)
    check_date_range(start, start)
    try:
        index = _regular_dates(start, periods, freq, name)
    except (pd.errors.OutOfBoundsDatetime, OverflowError) as exc:
        raise DateRangeError(f"{periods} periods of frequency {freq!r} from {start} run past "
                             f"the supported dates {_RANGE}") from exc
    if len(index):
        check_date_range(index[0], index[-1])
    return index


def _regular_dates(start: object, periods: int, freq: str,
                   name: str | None) -> pd.DatetimeIndex:
    if freq == "MS":
        first = pd.Timestamp(start)  # type: ignore[arg-type]
        if first.day == 1 and first.value % 86_400_000_000_000 == 0:  # midnight
            month = np.datetime64((first.year - 1970) * 12 + first.month - 1, "M")
            return _month_starts(month, 0, periods, first.unit, name)
    return pd.date_range(start, periods=periods, freq=freq, name=name)


def _month_starts(month: np.datetime64, skip: int, periods: int, unit: str,
                  name: str | None) -> pd.DatetimeIndex:
    """Month starts ``month + skip``, ... (``periods`` of them) at midnight, in ``unit``."""
    months = np.arange(skip, skip + periods) + month
    index = pd.DatetimeIndex(months.astype(f"datetime64[{unit}]"), name=name)
    # regular by construction: attach the frequency without pandas re-deriving the
    # dates to check it (which costs as much as building them); a pandas without the
    # private helper gets the checked (public) way
    if hasattr(index, "_with_freq"):
        return index._with_freq(_MONTH_START)
    return pd.DatetimeIndex(index, freq="MS")


@dataclass(frozen=True)
class Calendar:
    """Where the rows sit in time.

    ``index`` is None for plain arrays; then rows are numbered and ``period`` (if given)
    defines the seasonal cycle.
    """

    index: pd.DatetimeIndex | None
    freq: str | None
    kind: str  # "monthly", "quarterly", "weekly", "daily", "other" or "plain"
    period: int | None = None
    _futures: dict[int, pd.DatetimeIndex] = field(default_factory=dict, compare=False,
                                                  repr=False)

    def __len__(self) -> int:
        return 0 if self.index is None else len(self.index)

    def drop_first(self, count: int) -> Calendar:
        """The same calendar without its first ``count`` rows."""
        if self.index is None or count == 0:
            return self
        return Calendar(self.index[count:], self.freq, self.kind, self.period)

    def future(self, horizon: int) -> pd.DatetimeIndex | None:
        """The ``horizon`` dates after the last row (None for plain arrays)."""
        if self.index is None:
            return None
        if horizon not in self._futures:  # asked for twice per forecast (dates, terms)
            self._futures[horizon] = self._future(horizon)
        return self._futures[horizon]

    def _future(self, horizon: int) -> pd.DatetimeIndex:
        assert self.index is not None and self.freq is not None
        last = self.index.to_numpy()[-1]
        try:
            if self.freq == "MS" and last == last.astype("datetime64[D]"):  # at midnight
                dates = _month_starts(last.astype("datetime64[M]"), 1, horizon,
                                      self.index.unit, None)
            else:
                dates = _regular_dates(self.index[-1], horizon + 1, self.freq, None)[1:]
        except (pd.errors.OutOfBoundsDatetime, OverflowError) as exc:
            raise DateRangeError(f"{horizon} periods after {self.index[-1].date()} run past "
                                 f"the supported dates {_RANGE}; shorten the horizon",
                                 "horizon") from exc
        if len(dates):
            check_date_range(dates[0], dates[-1], argument="horizon")
        return dates

    def season_labels(self) -> tuple[str, ...]:
        """Labels of the seasonal dummies (the first season is the baseline)."""
        if self.kind in ("monthly", "weekly"):
            return tuple(f"month={m}" for m in range(2, 13))
        if self.kind == "quarterly":
            return tuple(f"quarter={q}" for q in range(2, 5))
        if self.kind == "daily":
            days = _WEEKDAYS[:5] if self.freq == "B" else _WEEKDAYS  # no weekend rows
            return tuple(f"weekday={d}" for d in days[1:])
        if self.kind == "plain" and self.period is not None:
            return tuple(f"season={s}" for s in range(2, self.period + 1))
        raise SpecificationError(
            f"seasonal dummies need monthly, quarterly, weekly or daily dates, or a "
            f"'period' for plain arrays; this data is {self.kind!r}"
        )

    def season_codes(self, rows: IntArray, dates: pd.DatetimeIndex | None) -> IntArray:
        """Season number (0-based) of each row; ``rows`` are positions from the first row."""
        if self.kind in ("monthly", "weekly"):
            assert dates is not None
            return np.asarray(dates.month, dtype=np.int64) - 1
        if self.kind == "quarterly":
            assert dates is not None
            return np.asarray(dates.quarter, dtype=np.int64) - 1
        if self.kind == "daily":
            assert dates is not None
            return np.asarray(dates.day_of_week, dtype=np.int64)
        self.season_labels()  # raises for kinds without seasons
        assert self.period is not None
        return np.asarray(rows, dtype=np.int64) % self.period


def plain_calendar(period: int | None = None) -> Calendar:
    """Calendar of plain arrays: numbered rows, optional seasonal period."""
    if period is not None and (int(period) != period or period < 2):
        raise SpecificationError(f"period must be an integer >= 2; got {period!r}")
    return Calendar(None, None, "plain", None if period is None else int(period))


#: pandas' frequency inference as a string, without its warning about the return type
#: (pandas 3.1 deprecates the string): its internal string version where it has one,
#: else the public function (which then returns a string or an offset, quietly). No
#: ``pd.option_context``: that is process-wide and threads would undo each other's.
_infer_freq_any = getattr(frequencies, "infer_freq_str", pd.infer_freq)


def _infer_freq(index: pd.DatetimeIndex) -> str | None:
    """The frequency of ``index`` as a string (None when uneven)."""
    found = _infer_freq_any(index)
    if found is None or isinstance(found, str):
        return found
    return str(found.freqstr)


def _likely_freq(index: pd.DatetimeIndex) -> str | None:
    """The most common frequency of runs of 3 timestamps (for pointing at a gap)."""
    guesses = [_infer_freq(index[i : i + 3]) for i in range(min(len(index) - 2, 60))]
    found = [g for g in guesses if g is not None]
    return max(found, key=found.count) if found else None


def _kind(offset: offsets.BaseOffset) -> str:
    if isinstance(offset, offsets.MonthBegin | offsets.MonthEnd) and offset.n == 1:
        return "monthly"
    if isinstance(offset, offsets.QuarterBegin | offsets.QuarterEnd) and offset.n == 1:
        return "quarterly"
    if isinstance(offset, offsets.Week) and offset.n == 1:
        return "weekly"
    if isinstance(offset, offsets.Day | offsets.BusinessDay) and offset.n == 1:
        return "daily"
    return "other"


def calendar_from_index(index: pd.DatetimeIndex, freq: str | None = None) -> Calendar:
    """Validate a DatetimeIndex and find its frequency.

    Raises
    ------
    TimeIndexError
        Duplicate, unsorted or unevenly spaced timestamps, or too few to tell the spacing.
    """
    if index.tz is not None:
        index = index.tz_localize(None)
    if len(index):
        check_date_range(index.min(), index.max())
    if not index.is_unique:
        dup = index[index.duplicated()]
        raise TimeIndexError(
            f"timestamp {dup[0].date()} appears more than once; keep one row per period"
        )
    if not index.is_monotonic_increasing:
        raise TimeIndexError("timestamps are not in increasing order; sort the rows by date")
    if freq is None and index.freq is not None:
        # pandas checked the spacing when it attached the frequency to the index
        return Calendar(index, check_frequency(index.freq).freqstr, _kind(index.freq))
    if freq is None:
        if len(index) < 3:
            raise TimeIndexError("need at least 3 timestamps to tell the frequency")
        freq = _infer_freq(index)
    if freq is None:
        likely = _likely_freq(index)
        if likely is None:
            gaps = np.diff(index.asi8)
            where, hint = int(np.argmax(gaps != gaps[0])) + 1, ""
        else:
            regular = pd.date_range(index[0], periods=len(index), freq=likely)
            where = max(int(np.argmax(regular != index)), 1)
            hint = f", expected {regular[where].date()} for frequency {likely!r}"
        raise TimeIndexError(
            f"timestamps are not evenly spaced (first break at {index[where].date()}, "
            f"after {index[where - 1].date()}{hint}); give one row per period with no gaps"
        )
    offset = check_frequency(freq)
    if index.freq is not None and index.freq == offset:
        # pandas checked the spacing when it attached the frequency to the index
        return Calendar(index, offset.freqstr, _kind(offset))
    regular = regular_dates(index[0], len(index), offset.freqstr)
    if not regular.equals(index):
        bad = int(np.argmax(regular != index))
        raise TimeIndexError(
            f"timestamp {index[bad].date()} does not follow frequency {freq!r} "
            f"(expected {regular[bad].date()}); give one row per period with no gaps"
        )
    return Calendar(pd.DatetimeIndex(index, freq=offset), offset.freqstr, _kind(offset))
