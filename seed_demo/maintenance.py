"""Maintenance events of the demo pumps: overhauls, oil care, the swap-out inspection and a seal repair."""

import datetime as dt

import numpy as np
import pandas as pd

from seed_demo.hour_meters import HourMeters
from seed_demo.layout import OIL_CARE, OVERHAULS, SLOTS, SWAP_REPLACES

EVENT_TIME = pd.Timedelta(hours=12)  # work is logged at midday, after the morning round

# Smaller jobs: (pump, days before end, kind, cost, downtime h, failure mode, note); invented.
SMALL_JOBS = (
    (
        SWAP_REPLACES,
        None,
        "inspection",
        0.0,
        4.0,
        "external_leakage",
        "weeping shaft seal; taken off press-2 pump 2 and put on the spares shelf",
    ),
    ("RS-703", 500, "seal_repair", 320.0, 6.0, "external_leakage", "shaft seal replaced in place"),
    (
        "EY-203",
        30,
        "inspection",
        np.nan,
        1.0,
        "low_output",
        "operators report a slow fast-approach stroke; flow test booked",
    ),
)


def overhaul_days(end: dt.date) -> dict[str, pd.Timestamp]:
    """Date of each planned overhaul."""
    return {pump: pd.Timestamp(end - dt.timedelta(days=days)) for pump, (days, _, _) in OVERHAULS.items()}


def draw_events(
    rng: np.random.Generator, specs: pd.DataFrame, meters: HourMeters, end: dt.date, swap_day: dt.date
) -> pd.DataFrame:
    """All events, with the pump's hour meter at each."""
    pump_index = {p: i for i, p in enumerate(specs["pump"])}
    first_pump = {}
    for slot in SLOTS:
        first_pump.setdefault(slot.machine, slot.pump)
    cost_of = dict(zip(specs["pump"], specs["overhaul_cost"], strict=True))

    rows = [
        (
            pump,
            day,
            "overhaul",
            round(cost_of[pump] * rng.uniform(0.9, 1.25), -1),
            float(rng.integers(16, 73)),
            OVERHAULS[pump][1],
            OVERHAULS[pump][2],
        )
        for pump, day in overhaul_days(end).items()
    ]
    rows += [
        (
            first_pump[machine],
            pd.Timestamp(end - dt.timedelta(days=days)),
            kind,
            cost,
            4.0,
            None,
            f"{note} (whole {machine} reservoir)",
        )
        for machine, days, kind, cost, note in OIL_CARE
    ]
    rows += [
        (
            pump,
            pd.Timestamp(swap_day if days is None else end - dt.timedelta(days=days)),
            kind,
            cost,
            downtime,
            mode,
            note,
        )
        for pump, days, kind, cost, downtime, mode, note in SMALL_JOBS
    ]
    events = pd.DataFrame(rows, columns=["pump", "date", "kind", "cost", "downtime_h", "failure_mode", "note"])
    events["hours"] = meters.read(events["pump"].map(pump_index).to_numpy(), events["date"] + EVENT_TIME)
    return events.sort_values(["date", "pump"], ignore_index=True)
