"""Write examples/history.csv: two years of weekly sales of one invented tin (TEA-950),
simulated from known true parameters by the library's own generator, in the columns
`POST /v1/imports` reads. Run from the repository root: python examples/make_history.py

The truth behind the file: log-log demand with own-price elasticity -1.8 at a base price
of 9.00 and 140 tins a week, rival price elasticity 0.8, promotions +20%, ad spend
elasticity 0.08, holidays +30%; the unit cost drifts between about 3.8 and 4.6.
"""

from __future__ import annotations

import csv
import io
import math
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from models import simulate_product  # noqa: E402

OUT = ROOT / "examples" / "history.csv"
COVARIATES = ("rival_price", "promo", "ad_spend", "holiday")


def history_csv() -> str:
    product = simulate_product(
        950, elasticity=-1.8, base_price=9.0, base_units=140.0, round_units=True, sku="TEA-950"
    )
    h = product.history
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["sku", "period", "price", "units", "unit_cost", "in_stock", *COVARIATES])
    for i in range(h.n_periods):
        cost = float(h.unit_cost[i])
        writer.writerow(
            [
                "TEA-950",
                str(h.periods[i]),
                f"{float(h.price[i]):.2f}",
                f"{float(h.units[i]):.0f}",
                f"{cost:.2f}" if math.isfinite(cost) else "",
                "true" if bool(h.in_stock[i]) else "false",
                *(f"{float(h.covariates[name][i]):.4g}" for name in COVARIATES),
            ]
        )
    return out.getvalue()


if __name__ == "__main__":
    OUT.write_text(history_csv())
    print(f"wrote {OUT}")
