"""What an inventory system would run each month against a Fanfold service.

Sends the bicycle-parts demand history, asks for the next months' demand and the
running total over a replenishment lead time, and prints, per product line, the median
and the 95th percentile of demand over the lead time (a starting point for a reorder
point; review it before ordering).

    fanfold serve --port 8000 &
    python examples/inventory_forecast.py --url http://127.0.0.1:8000 --lead-time 3
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from service.client import FanfoldClient

HERE = Path(__file__).resolve().parent


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--url", default="http://127.0.0.1:8000", help="service address")
    parser.add_argument("--data", default=str(HERE / "bike_parts_demand.csv"))
    parser.add_argument("--lead-time", type=int, default=3, help="months until an order arrives")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args(argv)

    demand = pd.read_csv(args.data, index_col=0, parse_dates=True)
    with FanfoldClient(args.url) as fanfold:
        monthly = fanfold.forecast(demand, horizon=args.lead_time, seed=args.seed,
                                   seasonal=True, quantiles=[0.05, 0.5, 0.95])
        totals = fanfold.forecast(demand, horizon=args.lead_time, seed=args.seed,
                                  seasonal=True, quantiles=[0.5, 0.95], cumulative=True)
    print("next month, units:")
    print(monthly[monthly["step"] == 1][["series", "date", "q0.05", "median", "q0.95"]]
          .round(0).to_string(index=False))
    print(f"\ndemand over the {args.lead_time}-month lead time, units:")
    lead = totals[totals["step"] == args.lead_time][["series", "q0.5", "q0.95"]]
    print(lead.rename(columns={"q0.5": "median", "q0.95": "95th percentile"})
          .round(0).to_string(index=False))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
