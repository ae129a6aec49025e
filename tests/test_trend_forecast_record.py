"""The forecast record: forecasts made months before an interval ended, scored against what happened.

Checked by hand (plain date arithmetic, no source needed beyond the calendar); all pumps invented.
"""

import numpy as np
import pandas as pd
import pytest

from fleet.trend.forecast_record import forecast_record

D = pd.Timestamp


def _forecasts():
    return pd.DataFrame([
        # pump 1 (piston): ended 2025-07-01; forecast 3 months ahead said 2025-07-11 (10 days late), band held.
        (1, "axial_piston", D("2025-04-01"), D("2025-07-11"), D("2025-06-01"), D("2025-08-20")),
        # ... and 6 months ahead said 2025-06-11 (20 days early), band [05-01, 06-21] missed.
        (1, "axial_piston", D("2025-01-02"), D("2025-06-11"), D("2025-05-01"), D("2025-06-21")),
        # ... and 12 months ahead: no limit expected.
        (1, "axial_piston", D("2024-07-01"), pd.NaT, pd.NaT, pd.NaT),
        # a forecast far from any lead (2 weeks before the end) is not used.
        (1, "axial_piston", D("2025-06-17"), D("2025-07-02"), D("2025-06-25"), D("2025-07-09")),
        # pump 2 (piston): ended 2025-03-31; 3 months ahead said 2025-03-01 (30 days early), open late edge.
        (2, "axial_piston", D("2025-01-05"), D("2025-03-01"), D("2025-02-01"), pd.NaT),
        # pump 3 (gear): two intervals. The second interval's 3-month forecast may not come from the first.
        (3, "external_gear", D("2024-12-28"), D("2025-04-10"), D("2025-03-01"), D("2025-05-01")),
        (3, "external_gear", D("2025-07-02"), D("2025-10-02"), D("2025-09-15"), D("2025-10-20")),
    ], columns=["pump_id", "kind", "made_at", "limit_date", "limit_date_low", "limit_date_high"])


def _outcomes():
    return pd.DataFrame({
        "pump_id": [1, 2, 3, 3],
        "ended_at": [D("2025-07-01"), D("2025-03-31"), D("2025-04-01"), D("2025-10-01")],
        "how": ["limit_crossed", "overhaul", "overhaul", "replacement"],
    })


def test_each_outcome_is_scored_by_the_forecast_made_nearest_each_lead():
    rec = forecast_record(_forecasts(), _outcomes())
    rows = rec.rows.set_index(["pump_id", "ended_at", "lead"])
    one_3 = rows.loc[(1, D("2025-07-01"), "3 months")]
    assert one_3["made_at"] == D("2025-04-01")  # 91 days before the end, not the one made 2 weeks before
    assert one_3["error_days"] == 10 and one_3["band_held"]
    assert one_3["lead_days"] == 91 and one_3["relative_error"] == pytest.approx(10 / 91)
    one_6 = rows.loc[(1, D("2025-07-01"), "6 months")]
    assert one_6["error_days"] == -20 and not one_6["band_held"]  # ended after the band's late edge
    one_12 = rows.loc[(1, D("2025-07-01"), "12 months")]
    assert one_12["no_forecast"] and not one_12["band_held"] and np.isnan(one_12["error_days"])
    two = rows.loc[(2, D("2025-03-31"), "3 months")]
    assert two["error_days"] == -30 and two["band_held"]  # open late edge: holds everything after 02-01
    # Pump 3's second interval: its 3-month forecast (2025-07-02) is inside; the one made 2024-12-28 belongs
    # to the first interval and is scored there.
    assert rows.loc[(3, D("2025-10-01"), "3 months"), "made_at"] == D("2025-07-02")
    assert rows.loc[(3, D("2025-04-01"), "3 months"), "error_days"] == 9
    assert (3, D("2025-10-01"), "6 months") not in rows.index  # none made near 2025-04-02
    # 12 months before 2025-10-01 the forecast of 2024-12-28 is near enough (88 days off, 91 allowed) but it
    # was about the interval that ended 2025-04-01.
    assert (3, D("2025-10-01"), "12 months") not in rows.index


def test_summary_per_kind_and_lead():
    summary = forecast_record(_forecasts(), _outcomes()).summary.set_index(["kind", "lead"])
    piston_3 = summary.loc[("axial_piston", "3 months")]
    assert piston_3["outcomes"] == 2
    assert piston_3["median_error_days"] == pytest.approx((10 - 30) / 2)
    assert piston_3["median_abs_error_days"] == pytest.approx(20.0)
    assert piston_3["share_early"] == 0.5 and piston_3["share_late"] == 0.5
    assert piston_3["band_held"] == 1.0
    piston_12 = summary.loc[("axial_piston", "12 months")]
    assert piston_12["outcomes"] == 1 and piston_12["no_forecast"] == 1 and np.isnan(piston_12["band_held"])
    gear_3 = summary.loc[("external_gear", "3 months")]
    assert gear_3["outcomes"] == 2 and gear_3["band_held"] == 1.0  # 2025-04-01 in [03-01, 05-01]; 10-01 in band
    assert gear_3["median_error_days"] == pytest.approx((9 + 1) / 2)
    assert list(summary.index.get_level_values("lead")[:3]) == ["3 months", "6 months", "12 months"]


def test_no_outcomes_gives_empty_tables():
    rec = forecast_record(_forecasts(), _outcomes().iloc[:0])
    assert rec.rows.empty and rec.summary.empty
