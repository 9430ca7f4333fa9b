"""Time index: validation, frequency detection, future dates and seasonal labels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from priors.calendar import FIRST_DATE, calendar_from_index, plain_calendar, regular_dates
from priors.data import load_series
from priors.errors import DateRangeError, SpecificationError, TimeIndexError
from priors.forecast import Forecast


def _dates(freq: str, periods: int = 24, start: str = "2021-01-01") -> pd.DatetimeIndex:
    """Dates as a user would read them from a file: regular, but with no ``freq`` set."""
    return pd.DatetimeIndex(list(pd.date_range(start, periods=periods, freq=freq)))


# ---------------------------------------------------------------- bad indexes


def test_duplicate_timestamp_is_named():
    idx = _dates("MS", 6)
    idx = idx.insert(3, idx[3])
    with pytest.raises(TimeIndexError, match=r"2021-04-01 appears more than once; keep one row"):
        calendar_from_index(idx)


def test_unsorted_timestamps():
    idx = _dates("MS", 6)[[0, 2, 1, 3, 4, 5]]
    with pytest.raises(TimeIndexError, match="not in increasing order; sort the rows by date"):
        calendar_from_index(idx)


@pytest.mark.parametrize(
    ("freq", "start", "after", "at", "expected"),
    [
        ("MS", "2021-01-01", "2021-06-01", "2021-08-01", "2021-07-01"),
        ("ME", "2021-01-31", "2021-06-30", "2021-08-31", "2021-07-31"),
        ("D", "2021-01-01", "2021-01-06", "2021-01-08", "2021-01-07"),
    ],
)
def test_gap_names_the_first_missing_period(freq, start, after, at, expected):
    # months differ in length, so the break must be found against the calendar, not by
    # comparing raw spacings (that pointed at the first 31-day month instead)
    idx = _dates(freq, 12, start).delete(6)
    match = rf"not evenly spaced \(first break at {at}, after {after}, expected {expected}"
    with pytest.raises(TimeIndexError, match=match):
        calendar_from_index(idx)
    with pytest.raises(TimeIndexError, match="give one row per period with no gaps"):
        load_series(pd.DataFrame({"a": np.arange(11.0)}, index=idx))


def test_timestamps_off_the_declared_frequency():
    idx = pd.DatetimeIndex(["2021-01-01", "2021-02-01", "2021-03-15"])
    with pytest.raises(TimeIndexError, match=r"2021-03-15 does not follow frequency 'MS' "
                                             r"\(expected 2021-03-01\)"):
        calendar_from_index(idx, freq="MS")


def test_too_few_timestamps_to_tell_the_frequency():
    with pytest.raises(TimeIndexError, match="at least 3 timestamps"):
        calendar_from_index(_dates("MS", 2))


def test_unknown_frequency_string():
    with pytest.raises(TimeIndexError, match="unknown frequency 'fortnightly'"):
        calendar_from_index(_dates("MS", 4), freq="fortnightly")


# ---------------------------------------------------------------- detection


@pytest.mark.parametrize(
    ("freq", "kind", "freqstr"),
    [
        ("MS", "monthly", "MS"),
        ("ME", "monthly", "ME"),
        ("QS", "quarterly", "QS-JAN"),
        ("QE", "quarterly", "QE-DEC"),
        ("W", "weekly", "W-SUN"),
        ("W-WED", "weekly", "W-WED"),
        ("D", "daily", "D"),
        ("B", "daily", "B"),
        ("2MS", "other", "2MS"),
    ],
)
def test_frequency_detected_and_future_dates_continue(freq, kind, freqstr):
    full = _dates(freq, 30)
    cal = calendar_from_index(full[:24])
    assert (cal.kind, cal.freq) == (kind, freqstr)
    assert cal.future(6).equals(full[24:])


def test_declared_index_freq_is_used():
    cal = calendar_from_index(pd.date_range("2021-01-01", periods=2, freq="MS"))
    assert cal.kind == "monthly"


def test_timezone_is_dropped_and_wall_times_kept():
    idx = pd.date_range("2021-01-01", periods=5, freq="D", tz="Europe/Berlin")
    cal = calendar_from_index(idx)
    assert cal.index.tz is None
    assert cal.index[0] == pd.Timestamp("2021-01-01")


# ---------------------------------------------------------------- seasons


@pytest.mark.parametrize(
    ("freq", "labels"),
    [
        ("MS", tuple(f"month={m}" for m in range(2, 13))),
        ("W", tuple(f"month={m}" for m in range(2, 13))),
        ("QE", ("quarter=2", "quarter=3", "quarter=4")),
        ("D", tuple(f"weekday={d}" for d in ("Tue", "Wed", "Thu", "Fri", "Sat", "Sun"))),
        # business days never fall on a weekend: Sat/Sun dummies would be all-zero columns
        ("B", ("weekday=Tue", "weekday=Wed", "weekday=Thu", "weekday=Fri")),
    ],
)
def test_season_labels(freq, labels):
    assert calendar_from_index(_dates(freq)).season_labels() == labels


def test_season_codes_follow_the_dates():
    cal = calendar_from_index(_dates("QS", 6, "2021-07-01"))
    np.testing.assert_array_equal(cal.season_codes(np.arange(6), cal.index), [2, 3, 0, 1, 2, 3])


def test_weekday_codes():
    cal = calendar_from_index(_dates("D", 7, "2024-01-01"))  # a Monday
    np.testing.assert_array_equal(cal.season_codes(np.arange(7), cal.index), np.arange(7))


def test_no_seasons_without_a_known_cycle():
    with pytest.raises(SpecificationError, match="seasonal dummies need .* this data is 'other'"):
        calendar_from_index(_dates("2MS")).season_labels()
    with pytest.raises(SpecificationError, match="'period' for plain arrays; this data is 'plain'"):
        plain_calendar().season_labels()


def test_plain_calendar():
    cal = plain_calendar(4)
    assert (len(cal), cal.future(3)) == (0, None)
    assert cal.season_labels() == ("season=2", "season=3", "season=4")
    np.testing.assert_array_equal(cal.season_codes(np.arange(6), None), [0, 1, 2, 3, 0, 1])


@pytest.mark.parametrize("period", [1, 2.5, 0])
def test_plain_period_must_be_an_integer_of_at_least_2(period):
    with pytest.raises(SpecificationError, match="period must be an integer >= 2"):
        plain_calendar(period)


def test_drop_first_keeps_the_frequency():
    cal = calendar_from_index(_dates("MS", 12)).drop_first(1)
    assert len(cal) == 11 and cal.index[0] == pd.Timestamp("2021-02-01")
    assert cal.future(1)[0] == pd.Timestamp("2022-01-01")


@pytest.mark.parametrize("start", ["2016-01-01", "1999-12-01", "2016-01-01T00:00:00",
                                   "2016-01-01 00:00:00.000000001", "1970-01-01",
                                   "2016-01-15", "2016-03-01 10:30",
                                   pd.Timestamp("2020-02-01")])
@pytest.mark.parametrize("periods", [1, 7, 240])
@pytest.mark.parametrize("freq", ["MS", "QS", "W", "D"])
def test_regular_dates_equal_pandas_date_range(start, periods, freq):
    # Reference library: pandas' date_range (values, unit, frequency and name)
    ref = pd.date_range(start, periods=periods, freq=freq, name="date")
    got = regular_dates(start, periods, freq, name="date")
    pd.testing.assert_index_equal(got, ref, exact=True)
    assert got.freq == ref.freq


@pytest.mark.parametrize("freq", ["MS", "QS", "W", "D", "B", "ME", "h"])
@pytest.mark.parametrize("unit", ["s", "ns"])
def test_forecast_step_labels_are_the_iso_dates(freq, unit):
    # Reference: the standard library's date.isoformat of each pandas Timestamp
    dates = pd.date_range("1999-11-28 06:00", periods=30, freq=freq).as_unit(unit)
    fc = Forecast(np.zeros((2, 30, 1)), ("tyres",), dates)
    assert fc.steps() == [d.date().isoformat() for d in dates]
    assert Forecast(np.zeros((2, 3, 1)), ("tyres",), None).steps() == ["1", "2", "3"]


@pytest.mark.parametrize("start", ["2016-01-01", "1969-12-01", "2016-03-01 10:30"])
@pytest.mark.parametrize("unit", ["s", "ms", "ns"])
@pytest.mark.parametrize("freq", ["MS", "QS", "D"])
def test_future_dates_equal_pandas_date_range(start, unit, freq):
    # Reference library: pandas' date_range continued past the last row
    index = pd.date_range(start, periods=30, freq=freq).as_unit(unit)
    ref = pd.date_range(index[-1], periods=13, freq=freq)[1:]
    got = calendar_from_index(index).future(12)
    pd.testing.assert_index_equal(got, ref, exact=True)
    assert got.freq == ref.freq


# ---------------------------------------------------------------- supported dates


@pytest.mark.parametrize(("start", "periods", "freq"), [
    ("0001-01-01", 3, "MS"),     # before pandas' nanosecond range
    ("1500-01-01", 24, "QS"),
    ("1677-12-01", 3, "MS"),     # one month before the first supported date
    ("2261-06-01", 12, "MS"),    # runs into 2262
    ("9995-01-01", 30, "MS"),
    ("2000-01-01", 30, "1000YS"),  # the last date is in year 31000
])
def test_dates_outside_the_supported_calendar_are_refused(start, periods, freq):
    with pytest.raises(DateRangeError, match="1678-01-01 to 2261-12-31") as info:
        regular_dates(start, periods, freq)
    assert info.value.argument == "dates"
    assert isinstance(info.value, TimeIndexError)  # callers catching the parent still do


def test_an_index_outside_the_supported_calendar_is_refused():
    late = pd.DatetimeIndex(np.array(["9999-10-01", "9999-11-01", "9999-12-01"],
                                     dtype="datetime64[s]"))
    with pytest.raises(DateRangeError, match=r"first date is 9999-10-01"):
        calendar_from_index(late)
    early = pd.DatetimeIndex(np.array(["1500-01-01", "1500-02-01", "1500-03-01"],
                                      dtype="datetime64[s]"))
    with pytest.raises(DateRangeError, match=r"first date is 1500-01-01"):
        calendar_from_index(early)


def test_the_first_and_last_supported_dates_work():
    assert regular_dates(FIRST_DATE, 3, "MS")[0] == FIRST_DATE
    cal = calendar_from_index(_dates("MS", 12, "2260-12-01"))
    assert cal.future(1)[0] == pd.Timestamp("2261-12-01")


@pytest.mark.parametrize("freq", ["MS", "QS", "W-SUN", "D"])
def test_a_future_past_the_last_supported_date_names_the_horizon(freq):
    cal = calendar_from_index(_dates(freq, 12, "2255-01-01" if freq in ("MS", "QS")
                                     else "2261-06-01"))
    with pytest.raises(DateRangeError, match="shorten the horizon") as info:
        cal.future(400)
    assert info.value.argument == "horizon"


# ---------------------------------------------------------------- no shared state


def test_frequency_inference_changes_no_pandas_option(monkeypatch):
    """Calendars are built in several request threads at once: a process-wide pandas
    option set on one thread was undone by another ('str' object has no attribute
    'freqstr' under load). Nothing on this path may touch pandas' options."""
    def refuse(*args, **kwargs):
        raise AssertionError("pandas options changed on a request path")

    monkeypatch.setattr(pd, "option_context", refuse)
    monkeypatch.setattr(pd, "set_option", refuse)
    for freq in ("MS", "QS", "W-SUN", "D", "B", "YS"):
        assert calendar_from_index(_dates(freq)).freq is not None
    with pytest.raises(TimeIndexError, match="not evenly spaced"):
        calendar_from_index(_dates("MS").delete(5))


def test_frequency_inference_agrees_across_threads():
    from concurrent.futures import ThreadPoolExecutor

    indexes = [_dates(f) for f in ("MS", "QS", "W-SUN", "D")] * 50
    expected = [calendar_from_index(i).freq for i in indexes]
    with ThreadPoolExecutor(max_workers=8) as pool:
        found = list(pool.map(lambda i: calendar_from_index(i).freq, indexes))
    assert found == expected


# ---------------------------------------------------------------- daily or longer


@pytest.mark.parametrize("freq", ["h", "min", "30min", "12h", "s"])
def test_frequencies_finer_than_a_day_are_refused(freq):
    with pytest.raises(TimeIndexError, match="finer than a day") as info:
        regular_dates("2024-01-01", 10, freq)
    assert info.value.argument == "frequency"
    hourly = pd.DatetimeIndex(list(pd.date_range("2024-01-01", periods=24, freq=freq)))
    with pytest.raises(TimeIndexError, match="finer than a day"):
        calendar_from_index(hourly)


@pytest.mark.parametrize("freq", ["D", "B", "2D", "24h", "W-SUN", "MS", "QS", "YS"])
def test_daily_and_longer_frequencies_are_accepted(freq):
    assert len(regular_dates("2024-01-01", 10, freq)) == 10
