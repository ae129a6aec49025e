"""When each demo pump was visited: reading rounds per machine, missed rounds, overdue pumps, the one swap."""

import datetime as dt

import numpy as np
import pandas as pd

from seed_demo.layout import (
    DRAIN_JUMP_PUMP,
    MACHINES,
    OVERDUE_LAST_READING_DAYS,
    SWAP_PUMP,
    SWAP_REPLACES,
)

MISSED_ROUND_SHARE = 0.04  # a whole machine skipped (shutdown, no technician)
MISSED_PUMP_SHARE = 0.03  # one pump skipped on a round (guard off, pump stopped)
ROUND_START_HOUR = 7.5


def occupancy(specs: pd.DataFrame, first_day: dt.date, end: dt.date, swap_day: dt.date) -> pd.DataFrame:
    """Which pump sat on which machine and position from when until when (end exclusive)."""
    occ = specs[["pump", "machine", "position"]].copy()
    occ["pump_index"] = np.arange(len(specs))
    occ["from_day"] = pd.Timestamp(first_day)
    occ["until_day"] = pd.Timestamp(end + dt.timedelta(days=1))
    leaving = occ["pump"].isin([SWAP_PUMP, SWAP_REPLACES])
    occ.loc[leaving, "until_day"] = pd.Timestamp(swap_day)
    taken_over = occ[occ["pump"] == SWAP_REPLACES].iloc[0]
    moved = occ[occ["pump"] == SWAP_PUMP].copy()
    moved["machine"] = taken_over["machine"]
    moved["position"] = taken_over["position"]
    moved["from_day"] = pd.Timestamp(swap_day)
    moved["until_day"] = pd.Timestamp(end + dt.timedelta(days=1))
    return pd.concat([occ, moved], ignore_index=True)


def schedule_visits(rng: np.random.Generator, occ: pd.DataFrame, first_day: dt.date, end: dt.date) -> pd.DataFrame:
    """One row per reading: pump_index, pump, machine, taken_at (Timestamp). Rounds end on `end`."""
    span_days = (end - first_day).days
    visits = []
    for order, machine in enumerate(MACHINES):
        back = np.arange(0, span_days // machine.round_days + 1) * machine.round_days
        missed = rng.random(len(back)) < MISSED_ROUND_SHARE
        missed[:2] = False  # the last two rounds were walked everywhere
        round_days = pd.Timestamp(end) - pd.to_timedelta(back[~missed], unit="D")
        on_machine = occ[occ["machine"] == machine.name].reset_index(drop=True)
        grid = on_machine.merge(pd.DataFrame({"round_day": round_days}), how="cross")
        grid["walk_order"] = np.repeat(np.arange(len(on_machine)), len(round_days))  # cross merge: pump-major
        grid = grid[(grid["round_day"] >= grid["from_day"]) & (grid["round_day"] < grid["until_day"])]
        minutes = (
            ROUND_START_HOUR * 60 + 40 * (order % 4) + 7 * grid["walk_order"].to_numpy() + rng.uniform(0, 5, len(grid))
        )
        grid = grid.assign(
            machine=machine.name,
            taken_at=(grid["round_day"] + pd.to_timedelta(np.round(minutes), unit="min")),
        )
        visits.append(grid[["pump_index", "pump", "machine", "position", "taken_at", "round_day"]])
    visits = pd.concat(visits, ignore_index=True)

    is_last_round = visits["round_day"] == pd.Timestamp(end)
    jump_guard = (visits["pump"] == DRAIN_JUMP_PUMP) & (visits["round_day"] >= pd.Timestamp(end) - pd.Timedelta(days=7))
    skipped = (rng.random(len(visits)) < MISSED_PUMP_SHARE) & ~is_last_round & ~jump_guard
    overdue_days = visits["pump"].map(OVERDUE_LAST_READING_DAYS)
    overdue = visits["round_day"] > pd.Timestamp(end) - pd.to_timedelta(overdue_days.fillna(-1), unit="D")
    visits = visits[~skipped & ~overdue.to_numpy()]
    return visits.sort_values(["taken_at", "pump"]).reset_index(drop=True)
