"""The engine on pumps that wear by other laws than the exponential: the law it names, its forecast, the
crossing it dates for a pump already past its limit, and the chart band. All pumps and readings invented
(benchmarks/wear_fleets.py); figures measured with these seeds are in the assertion messages."""

import numpy as np
import pandas as pd
import pytest
import trend_synthetic as ts

from fleet.trend.engine import analyze_fleet, results_to_records
from fleet.trend.remaining_life import averaged_band
from fleet.trend.status import wear_shape_sentence

N = 40


def _fleet(seed, law, covered, n_readings=40):
    """Pumps reaching the eta_v limit at known hours by `law`; readings over `covered` of that life."""
    rng = np.random.default_rng(seed)
    pumps = ts.make_pumps(N, rng)
    eta_new = rng.uniform(0.94, 0.96, N)
    crossing = rng.uniform(7000.0, 12000.0, N)
    ratio = (1 - ts.ETA_LIMIT) / (1 - eta_new)
    shapes = {
        "linear": lambda i, h: 1 + (ratio[i] - 1) * h / crossing[i],
        "accelerating": lambda i, h: 1 + (ratio[i] - 1) * (h / crossing[i]) ** 2.2,
        # run-in: 45 % of the rise to the limit comes early (time constant a tenth of the life), the rest steadily
        "run_in": lambda i, h: 1 + (ratio[i] - 1) * (0.45 * -np.expm1(-h / crossing[i] / 0.1) / -np.expm1(-10.0)
                                                     + 0.55 * h / crossing[i]),
    }
    per_day = covered * crossing / ((n_readings - 1) * 7.0)
    readings = ts.wear_readings(pumps, rng, n_readings=n_readings, eta_new=eta_new, hours_per_day=per_day,
                                wear=shapes[law])
    now = readings["taken_at"].max() + pd.Timedelta(days=1)
    truth = pd.DataFrame({"crossing": crossing, "per_day": per_day}, index=pumps["pump_id"])
    return pumps, readings, now, truth


@pytest.mark.parametrize("law,expected", [("linear", "linear"), ("accelerating", "power"), ("run_in", "run_in")])
def test_names_the_wear_law_and_forecasts_within_its_band(law, expected):
    pumps, readings, now, truth = _fleet(17, law, covered=0.7)
    res = analyze_fleet(pumps, readings, None, None, now=now).results
    remaining = truth["crossing"] - res["interval_hours"]
    named = (res["wear_law"] == expected).mean()
    rel = ((res["hours_to_limit"] - remaining).abs() / remaining).median()
    inside = ((res["hours_to_limit_low"].fillna(0) <= remaining)
              & (remaining <= res["hours_to_limit_high"].fillna(np.inf))).mean()
    figures = {"named": named, "median_rel_error": round(rel, 3), "inside_band": inside}
    assert named >= 0.8, figures
    assert rel <= 0.15, figures
    assert inside >= 0.75, figures
    weights = pd.DataFrame(list(res["wear_law_weights"]))
    assert np.allclose(weights.sum(axis=1), 1.0)
    if expected == "power":
        assert (res["wear_power"].dropna() > 1).mean() >= 0.8  # accelerating: exponents above 1
        row = res.iloc[0]  # the sentence a due or past pump's reasons carry
        assert "accelerating" in wear_shape_sentence(row["wear_law"], row["wear_law_weights"], row["wear_power"])
    if expected == "run_in":
        row = res.iloc[0]
        assert "fast at first" in wear_shape_sentence(row["wear_law"], row["wear_law_weights"], row["wear_power"])


def test_a_pump_past_its_limit_is_dated_from_its_readings():
    pumps, readings, now, truth = _fleet(23, "linear", covered=1.25)  # readings run a quarter beyond the limit
    res = analyze_fleet(pumps, readings, None, None, now=now).results
    assert (res["status"] == "past_limit").all()
    true_date = (ts.START + pd.Timedelta(hours=9)
                 + pd.to_timedelta(truth["crossing"] / truth["per_day"], unit="D")).dt.normalize()
    inside = (res["crossed_date_low"] <= true_date) & (true_date <= res["crossed_date_high"])
    off_days = (res["crossed_date"] - true_date).dt.days.abs()
    assert inside.mean() >= 0.8, inside.mean()
    assert off_days.median() <= 14, off_days.median()
    assert res["crossed_at_hours"].sub(truth["crossing"]).abs().div(truth["crossing"]).median() < 0.03
    assert (res["crossed_limit"] == "eta_v").all()
    assert res["reasons"].map(lambda rs: any(s.startswith("By its trend the volumetric efficiency limit was crossed")
                                             for s in rs)).all()


def test_new_fields_are_json_ready():
    pumps, readings, now, _ = _fleet(31, "linear", covered=0.6)
    rec = results_to_records(analyze_fleet(pumps, readings, None, None, now=now).results)[0]
    assert isinstance(rec["wear_law"], str)
    assert set(rec["wear_law_weights"]) == {"exponential", "linear", "power", "run_in"}
    assert all(isinstance(v, float) for v in rec["wear_law_weights"].values())
    assert rec["crossed_date"] is None and rec["crossed_limit"] is None  # not past its limit
    for key in ("eta_v_ref", "hours_to_limit", "hours_to_limit_low", "limit_date", "governing_limit"):
        assert key in rec


def test_chart_band_meets_the_limit_at_the_forecast_hours():
    pumps, readings, now, _ = _fleet(37, "accelerating", covered=0.7)
    analysis = analyze_fleet(pumps, readings, None, None, now=now)
    fit = analysis.fits.iloc[0]
    qmax = pumps["displacement_cc"].iloc[0] * ts.RATED_SPEED_RPM / 1000.0
    grid = np.array([fit["slip_crossing_low"], fit["slip_crossing_hours"], fit["slip_crossing_high"]])
    band = averaged_band(fit, grid, qmax, 0.90, "slip")
    # Forecast hours and bounds come from the same mixture as the band: at the forecast the averaged eta_v
    # is at the limit, at the early bound the band's low edge is, at the late bound its high edge.
    assert band["mean"].iloc[1] == pytest.approx(ts.ETA_LIMIT, abs=1e-6)
    assert band["low"].iloc[0] == pytest.approx(ts.ETA_LIMIT, abs=1e-6)
    assert band["high"].iloc[2] == pytest.approx(ts.ETA_LIMIT, abs=1e-6)
    assert (band["low"] <= band["mean"]).all() and (band["mean"] <= band["high"]).all()


def test_a_pump_gets_the_same_figures_whichever_pumps_are_analysed_with_it():
    pumps, readings, now, _ = _fleet(41, "accelerating", covered=0.8)
    full = analyze_fleet(pumps, readings, None, None, now=now).results
    some = [3, 8, 21]
    part = analyze_fleet(pumps[pumps["pump_id"].isin(some)], readings[readings["pump_id"].isin(some)], None, None,
                         now=now).results
    for column in ("eta_v_ref", "eta_v_decline_per_1000h", "hours_to_limit", "hours_to_limit_low",
                   "hours_to_limit_high", "wear_power"):
        assert np.allclose(part[column], full.loc[some, column], rtol=1e-12, equal_nan=True), column
    assert part["wear_law_weights"].tolist() == full.loc[some, "wear_law_weights"].tolist()
