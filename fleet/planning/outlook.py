"""A planning horizon in numbers: each pump's chance of an overhaul in it, and a plan's cost, saving and payback."""

import numpy as np
import pandas as pd

from fleet.trend.weibull import conditional_failure_probability


def overhaul_chances(age_hours, hours_per_day, weeks: int, beta: float, alpha: float) -> np.ndarray:
    """Each pump's probability of reaching an overhaul within ``weeks`` of running at its own hours per day."""
    age = pd.to_numeric(pd.Series(age_hours, dtype=object), errors="coerce").to_numpy(float)
    per_day = pd.to_numeric(pd.Series(hours_per_day, dtype=object), errors="coerce").to_numpy(float)
    horizon_hours = per_day * 7.0 * weeks
    return np.asarray(conditional_failure_probability(age, horizon_hours, beta, alpha), dtype=float)


def plan_totals(rows: list[dict]) -> list[dict]:
    """Overhaul cost, yearly saving and payback of the plan, per currency."""
    totals: dict[str, dict] = {}
    for r in rows:
        t = totals.setdefault(r["currency"] or "", {"currency": r["currency"], "pumps": 0, "overhaul_cost": 0.0,
                                                    "overhaul_saving_per_year": 0.0, "uncosted": 0})
        t["pumps"] += 1
        if r["overhaul_cost"] is None:
            t["uncosted"] += 1
        else:
            t["overhaul_cost"] += r["overhaul_cost"]
            t["overhaul_saving_per_year"] += r["overhaul_saving_per_year"] or 0.0
    for t in totals.values():
        saving = t["overhaul_saving_per_year"]
        t["payback_years"] = t["overhaul_cost"] / saving if saving > 0 else None
    return list(totals.values())
