"""What an inventory system would run each month against a Fanfold service.

Stores a model of the bicycle-parts demand history, then asks for

1. reorder advice per product line over the replenishment lead time (95% cycle service
   level), from the stock on hand and on order;
2. a "what if": tyre demand follows the sales plan (15% above the model's median for the
   next three months); what happens to inner tubes and brake pads?
3. how a jump in tyre demand spreads to the other lines, month by month.

The stock figures below are invented for the demo. Forecasts are estimates: review the
suggested orders before placing them.

    fanfold serve --port 8000 &
    python examples/inventory_forecast.py --url http://127.0.0.1:8000 --lead-time 3
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from service.client import FanfoldClient

HERE = Path(__file__).resolve().parent

#: invented stock positions for the demo: (on hand, on order)
STOCK = {"tyres": (2600, 1200), "inner_tubes": (4500, 2000), "brake_pads": (1500, 600),
         "chains": (1100, 500), "cassettes": (500, 300)}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--url", default="http://127.0.0.1:8000", help="service address")
    parser.add_argument("--data", default=str(HERE / "bike_parts_demand.csv"))
    parser.add_argument("--lead-time", type=int, default=3, help="months until an order arrives")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args(argv)

    demand = pd.read_csv(args.data, index_col=0, parse_dates=True)
    with FanfoldClient(args.url) as fanfold:
        model = fanfold.create_model(demand, seasonal=True, name="bike parts, monthly")
        items = [{"series": name, "on_hand": on_hand, "on_order": on_order,
                  "service_level": 0.95} for name, (on_hand, on_order) in STOCK.items()]
        advice = fanfold.replenishment(model["id"], lead_time=args.lead_time, items=items,
                                       seed=args.seed)
        baseline = fanfold.forecast_model(model["id"], horizon=3, seed=args.seed)
        plan = baseline[baseline["series"] == "tyres"]
        conditions = [{"series": "tyres", "step": int(r.step), "value": round(1.15 * r.median)}
                      for r in plan.itertuples()]
        scenario, checks = fanfold.scenario(model["id"], conditions, horizon=3, seed=args.seed)
        spread = fanfold.impulse_responses(model["id"], horizon=6, seed=args.seed)

    cols = ["name", "mean_demand", "reorder_point", "safety_stock", "inventory_position",
            "suggested_order", "stockout_probability"]
    print(f"reorder advice over the {args.lead_time}-month lead time (units; review "
          "before ordering):")
    print(advice["items"][cols].round(2).to_string(index=False))
    print("\nif tyre demand follows the plan (+15%): medians with and without the plan")
    rows = scenario[scenario["series"].isin(["inner_tubes", "brake_pads"])]
    print(rows[["series", "date", "median", "baseline_median"]].round(0).to_string(index=False))
    print("plan percentiles in the model's forecast:",
          ", ".join(f"{p:.0%}" for p in checks["prior_probability"]))
    print("\na one-standard-deviation jump in tyre demand, response in units (median):")
    tyre = spread[(spread["shock"] == "tyres")]
    print(tyre.pivot(index="step", columns="response", values="median").round(1).to_string())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
