"""Engine helpers of the service layer."""

from __future__ import annotations

import pandas as pd
import pytest

from service.engine import _dates


@pytest.mark.parametrize("start", ["2016-01-01", "1999-12-01", "2016-01-01T00:00:00",
                                   "2016-01-01 00:00:00.000000001", "1970-01-01",
                                   "2016-01-15", "2016-03-01 10:30"])
@pytest.mark.parametrize("periods", [1, 7, 240])
@pytest.mark.parametrize("frequency", ["MS", "QS", "W", "D"])
def test_dates_equal_pandas_date_range(start, periods, frequency):
    # Reference library: pandas' date_range (values, unit, frequency and name)
    ref = pd.date_range(start, periods=periods, freq=frequency, name="date")
    got = _dates(start, periods, frequency)
    pd.testing.assert_index_equal(got, ref, exact=True)
    assert got.freq == ref.freq
