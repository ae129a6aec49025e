"""An invented paper log of overhauls done before the plant started using fleet.

It gives the fleet's life statistics (the Weibull of running hours between overhauls per pump kind) something to
stand on, as a site's own maintenance history would. Lives are drawn from a Weibull per kind with invented
parameters; every overhaul lies before the pump's first reading, with its hour meter and a date worked back at the
pump's own hours per day.
"""

import numpy as np
import pandas as pd

# Invented typical lives (Weibull shape beta, scale alpha in running hours) per pump kind.
LIFE_BY_KIND = {
    "external_gear": (2.3, 14_000.0),
    "internal_gear": (2.3, 16_000.0),
    "gerotor": (2.1, 12_000.0),
    "lobe": (2.0, 10_000.0),
    "vane": (2.4, 11_000.0),
    "axial_piston": (2.6, 15_000.0),
    "radial_piston": (2.5, 18_000.0),
}
GAP_BEFORE_FIRST_READING_H = 1_500.0  # the last old overhaul lies at least this far before the first reading
MAX_PER_PUMP = 3
COLUMNS = ["pump", "date", "hours [h]", "kind", "cost", "downtime [h]", "failure_mode", "note"]


def earlier_overhauls(tables: dict[str, pd.DataFrame], seed: int) -> pd.DataFrame:
    """Overhaul events from before the readings, as an events import table (deterministic for a seed)."""
    rng = np.random.default_rng([seed, 4406])
    readings = tables["readings"].assign(
        hours=pd.to_numeric(tables["readings"]["hours [h]"]), at=pd.to_datetime(tables["readings"]["taken_at"])
    )
    span = readings.groupby("pump").agg(first_h=("hours", "min"), last_h=("hours", "max"), first_at=("at", "min"),
                                        last_at=("at", "max"))
    kinds = tables["pumps"].set_index("pump")["kind"]
    costs = pd.to_numeric(tables["pumps"].set_index("pump")["overhaul_cost"], errors="coerce")
    rows = []
    for pump, s in span.sort_index().iterrows():
        beta, alpha = LIFE_BY_KIND[kinds[pump]]
        per_day = (s.last_h - s.first_h) / max((s.last_at - s.first_at).days, 1)
        # Age of the current interval when readings began, then older lives going back towards new.
        hours = s.first_h - GAP_BEFORE_FIRST_READING_H - rng.uniform(0.0, 0.5) * alpha
        for _ in range(MAX_PER_PUMP):
            if hours < 0.25 * alpha:
                break
            date = s.first_at - pd.Timedelta(days=float((s.first_h - hours) / per_day))
            cost = costs.get(pump)
            rows.append({
                "pump": pump, "date": date.strftime("%Y-%m-%d"), "hours [h]": round(hours, 0), "kind": "overhaul",
                "cost": "" if pd.isna(cost) else round(float(cost) * rng.uniform(0.8, 1.1), 0),
                "downtime [h]": round(rng.uniform(6, 30), 0),
                "failure_mode": rng.choice(["internal_leakage", "low_output", "noise"]),
                "note": "invented: from the paper log kept before fleet",
            })
            hours -= alpha * rng.weibull(beta)
    return pd.DataFrame(rows, columns=COLUMNS).sort_values(["pump", "date"], kind="stable").reset_index(drop=True)
