"""The useful horizon of a forecast: dates and hours further than ten years ahead are words, not figures.

Plain calendar arithmetic (no source needed beyond the calendar); the figures are the issue's own example.
"""

from datetime import date

import pandas as pd

from fleet.horizon import BEYOND_WORDS, USEFUL_HOURS, date_text, horizon_end, hours_text, is_beyond

TODAY = date(2026, 12, 2)


def test_horizon_is_ten_years_of_days_from_today():
    assert BEYOND_WORDS == "beyond 10 years"
    assert horizon_end(TODAY) == date(2036, 12, 2)  # the same day ten calendar years on
    assert horizon_end(date(2028, 2, 29)) == date(2038, 2, 28)  # no 29 February in 2038


def test_a_date_in_2077_is_beyond_and_one_inside_stays_a_date():
    assert date_text("2077-05-01", TODAY) == "beyond 10 years"
    assert date_text(pd.Timestamp("2036-12-02"), TODAY) == "2036-12-02"
    assert date_text("2036-12-03", TODAY) == "beyond 10 years"
    assert date_text(None, TODAY) == "–" and date_text(pd.NaT, TODAY, "open") == "open"


def test_hours_are_judged_by_their_date_when_there_is_one():
    # 388,041 h is beyond ten years at any rate (round the clock: 87,660 h in ten years).
    assert USEFUL_HOURS == 87_660.0
    assert hours_text(388_041.0, today=TODAY) == "beyond 10 years"
    assert hours_text(80_000.0, today=TODAY) == "80,000 h"
    # 20,000 h at 5 h a day is about 11 years: its date decides.
    assert hours_text(20_000.0, "2037-12-01", TODAY) == "beyond 10 years"
    assert hours_text(20_000.0, "2030-12-01", TODAY) == "20,000 h"
    assert not is_beyond(None, float("nan"), TODAY) and hours_text(None) == "–"
