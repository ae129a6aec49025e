"""The pump page: HTML, its JSON and CSV twins, the referred readings and the flow-test baseline."""

import base64
import csv
import io
import math

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest

from fleet.charts import pump as charts
from fleet.services.pages.pump import READING_COLUMNS, baseline_flow_lpm

FIXED_PUMP = "EY-104"  # invented demo plant: an internal gear pump (fixed displacement, no case drain)
PISTON_PUMP = "EY-101"  # invented demo plant: a variable axial piston pump with a case drain

PAGE_KEYS = {"pump", "where", "oil", "limits", "headline", "installations", "events", "readings", "trend",
             "samples", "flow_test", "site_units"}
HEADLINE_KEYS = {"status", "reasons", "rank", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref",
                 "hours_to_limit", "hours_to_limit_low", "hours_to_limit_high", "limit_date", "governing_limit",
                 "prior_hours_to_overhaul", "energy_cost_per_year", "limit_date_low", "limit_date_high",
                 "confidence", "upper_bound_open", "currency", "leakage_kw", "overhaul_saving_per_year",
                 "overhaul_payback_years", "prior_b10_hours", "data_note", "last_reading_at", "hours_per_day",
                 "cleanliness_code", "computed_at", "wear_law", "wear_law_weights", "wear_power", "wear_shape",
                 "crossed_limit", "crossed_at_hours", "crossed_at_hours_low", "crossed_at_hours_high", "crossed_date",
                 "crossed_date_low", "crossed_date_high", "beyond_horizon"}


def _walther_cst(temp_c, nu40, nu100):
    """ASTM D341: log10(log10(nu + 0.7)) = A - B log10(T[K]), fixed by two data-sheet points."""
    z = lambda nu: math.log10(math.log10(nu + 0.7))  # noqa: E731
    t40, t100 = math.log10(313.15), math.log10(373.15)
    b = (z(nu40) - z(nu100)) / (t100 - t40)
    a = z(nu40) + b * t40
    return 10 ** (10 ** (a - b * math.log10(temp_c + 273.15))) - 0.7


def test_walther_helper_matches_the_astm_d341_worked_example():
    # ASTM D341 worked example (reproduced in our domain notes): 32 / 5.4 cSt at 40 / 100 degC -> 8.53 cSt at 80 degC.
    assert _walther_cst(80.0, 32.0, 5.4) == pytest.approx(8.53, abs=0.01)


def test_pump_page_shows_headline_charts_and_tables(client):
    page = client.get(f"/pumps/{PISTON_PUMP}")
    assert page.status_code == 200
    html = page.get_data(as_text=True)
    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    status = data["headline"]["status"]
    assert f"Pump {PISTON_PUMP}" in html
    assert {"past_limit": "Past limit", "due_soon": "Due soon", "watch": "Watch", "healthy": "Healthy"}[status] in html
    for text in ("Fleet history (not this pump's trend)", "Leakage energy cost", "Overhaul payback", "Rated data",
                 "Where it has been", "Maintenance", "Readings"):
        assert text in html
    for reason in data["headline"]["reasons"]:
        assert reason.replace("'", "&#39;") in html
    # Charts drawn by plotly served from this server, never a CDN: the page must work offline.
    assert '<script src="/assets/plotly.min.js"></script>' in html
    assert "cdn.plot.ly" not in html
    for div in ("chart-efficiency", "chart-drain", "chart-temperature"):
        assert f'id="{div}"' in html
    assert f'href="/pumps/{PISTON_PUMP}.json"' in html and f'href="/pumps/{PISTON_PUMP}.csv"' in html


def test_json_twin_has_exact_keys_and_matches_the_service_list(client):
    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    assert set(data) == PAGE_KEYS
    assert set(data["headline"]) == HEADLINE_KEYS
    assert set(data["readings"][0]) == set(READING_COLUMNS)
    assert set(data["limits"]) == {"eta_v_limit", "drain_limit_pct", "oil_temp_min_c", "oil_temp_max_c",
                                   "cleanliness_target", "reading_interval_days", "planning_horizon_weeks"}
    listed = {row["pump"]: row for row in client.get("/index.json?page_size=500").get_json()["pumps"]}
    assert data["headline"]["status"] == listed[PISTON_PUMP]["status"]
    assert data["headline"]["eta_v_ref"] == listed[PISTON_PUMP]["eta_v_ref"]
    # The same JSON when the request asks for it on the page's own address.
    negotiated = client.get(f"/pumps/{PISTON_PUMP}", headers={"Accept": "application/json"})
    assert negotiated.is_json and negotiated.get_json() == data


def test_csv_twin_is_the_readings_table(client):
    data = client.get(f"/pumps/{FIXED_PUMP}.json").get_json()
    response = client.get(f"/pumps/{FIXED_PUMP}.csv")
    assert response.status_code == 200 and response.mimetype == "text/csv"
    assert f'filename="pump-{FIXED_PUMP}.csv"' in response.headers["Content-Disposition"]
    rows = list(csv.reader(io.StringIO(response.get_data(as_text=True))))
    assert rows[0] == list(READING_COLUMNS)
    assert len(rows) - 1 == len(data["readings"]) > 10
    assert rows[-1][1] == data["readings"][-1]["taken_at"]  # after the reading_id column


def test_referred_efficiency_matches_the_handbook_referral(client):
    """eta_v,ref recomputed outside fleet: theoretical flow (handbook), ASTM D341 viscosity, laminar referral."""
    data = client.get(f"/pumps/{FIXED_PUMP}.json").get_json()
    pump, oil = data["pump"], data["oil"]
    usable = [r for r in data["readings"] if r["flag"] is None and r["outlet_flow_lpm"] is not None]
    row = usable[-1]  # the latest reading: taken in the machine whose oil the page lists
    q_th = pump["displacement_cc"] * row["speed_rpm"] / 1000.0  # Q_th = V_g n / 1000 (hydraulics handbook)
    assert row["eta_v"] == pytest.approx(row["outlet_flow_lpm"] / q_th, rel=1e-9)

    def mu(temp_c):  # mu = nu rho; density falls 0.07 %/K (common practice, no source)
        return _walther_cst(temp_c, oil["viscosity_40"], oil["viscosity_100"]) * oil["density_15"] * \
            (1 - 0.0007 * (temp_c - 15.0))

    # Laminar slip scales with pressure and inversely with viscosity (Wilson 1950; domain notes section 4).
    slip_ref = (q_th - row["outlet_flow_lpm"]) * (pump["rated_pressure_bar"] / row["outlet_pressure_bar"]) * \
        (mu(row["oil_temp_c"]) / mu(pump["reference_temp_c"]))
    expected = 1.0 - slip_ref / (pump["displacement_cc"] * pump["rated_speed_rpm"] / 1000.0)
    assert row["eta_v_ref"] == pytest.approx(expected, abs=2e-4)


def test_case_drain_raw_and_referred_as_percent_of_max_flow(client):
    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    row = next(r for r in reversed(data["readings"]) if r["flag"] is None and r["case_drain_lpm"] is not None)
    assert row["case_drain_pct"] == pytest.approx(100 * row["case_drain_lpm"] / data["pump"]["max_flow_lpm"])
    assert row["case_drain_pct_ref"] == pytest.approx(100 * row["case_drain_ref_lpm"] / data["pump"]["max_flow_lpm"])


def test_trend_forecast_reaches_the_limit_where_the_analysis_says(client):
    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    trend = data["trend"]
    assert trend is not None and trend["points"][0]["hours"] == pytest.approx(trend["interval_start_hours"])
    points = pd.DataFrame(trend["points"])
    assert (points["low"] <= points["mean"] + 1e-12).all() and (points["mean"] <= points["high"] + 1e-12).all()
    assert points["forecast"].any() and not points["forecast"].all()
    if trend["limit_hours"] is not None:
        at_limit = np.interp(trend["limit_hours"], points["hours"], points["mean"])
        assert at_limit == pytest.approx(data["limits"]["eta_v_limit"], abs=2e-3)


def test_baseline_flow_reproduces_the_worked_efficiency_example():
    # Fluid Power Journal, "Hydraulic Pumps and Motors: Considering Efficiency": 100 cm3/rev at 1000 rpm is
    # 100 L/min theoretical; 90 L/min at 207 bar is eta_v 0.90. A slip of 10 L/min at 207 bar gives that point.
    flows = baseline_flow_lpm(100.0, 1000.0, 10.0, 207.0, [0.0, 103.5, 207.0])
    assert flows == pytest.approx([100.0, 95.0, 90.0])  # slip grows linearly with pressure (laminar, Wilson)
    # Hot oil: half the viscosity, twice the slip (Hagen-Poiseuille: leakage inversely proportional to mu).
    assert baseline_flow_lpm(100.0, 1000.0, 10.0, 207.0, 207.0, viscosity_ratio=2.0) == pytest.approx(80.0)


def test_flow_test_points_sit_beside_the_baseline(client):
    tested = None
    for serial in [row["pump"] for row in client.get("/index.json?page_size=500").get_json()["pumps"]]:
        data = client.get(f"/pumps/{serial}.json").get_json()
        if data["flow_test"]:
            tested = data
            break
    assert tested is not None, "the invented demo plant has multi-point flow tests"
    test = tested["flow_test"]
    assert len(test["points"]) >= 3
    first = test["baseline"][0]
    # At zero pressure there is no slip: the baseline starts at V_g n / 1000 at the test's speed (handbook).
    assert first["pressure_bar"] == 0.0
    assert first["flow_lpm"] == pytest.approx(tested["pump"]["displacement_cc"] * test["speed_rpm"] / 1000.0)
    html = client.get(f"/pumps/{tested['pump']['serial']}").get_data(as_text=True)
    assert 'id="chart-flowtest"' in html and "Flow test of" in html


def test_unknown_pump_is_404_in_every_format(client):
    assert client.get("/pumps/NO-SUCH").status_code == 404
    missing = client.get("/pumps/NO-SUCH.json")
    assert missing.status_code == 404 and missing.get_json() == {"error": "no pump 'NO-SUCH' in the register"}


def test_service_list_links_reach_the_pump_page(client):
    html = client.get("/").get_data(as_text=True)
    assert f'href="/pumps/{FIXED_PUMP}"' in html
    assert client.get(f"/pumps/{FIXED_PUMP}").status_code == 200


def _typed_values(spec) -> list[float]:
    """A plotly typed array back as numbers: base64 of the values in the named numpy dtype (plotly.js' typed array
    form, which plotly.py writes for numpy arrays too)."""
    assert set(spec) == {"dtype", "bdata"}
    return np.frombuffer(base64.b64decode(spec["bdata"]), dtype=spec["dtype"]).tolist()


def test_efficiency_figure_carries_points_band_limit_and_events():
    readings = {"hours": [0.0, 500.0, 1000.0], "eta_v": [0.93, 0.92, 0.91], "eta_v_ref": [0.95, 0.94, 0.93]}
    band = {"hours": [0.0, 1000.0, 2000.0], "mean": [0.95, 0.93, 0.90], "low": [0.94, 0.92, 0.88],
            "high": [0.96, 0.94, 0.92], "forecast": [False, False, True]}
    events = [{"chart_hours": 700.0, "kind_label": "Inspection"}, {"chart_hours": None, "kind_label": "Unplaced"}]
    spec = charts.efficiency_figure(readings, band, 0.85, events)
    fig = go.Figure(data=spec["data"], layout=spec["layout"])  # plotly's own validators read the plain spec
    named = {trace.name: trace for trace in fig.data}
    assert _typed_values(named["η_v,ref (referred)"].y) == [0.95, 0.94, 0.93]
    assert _typed_values(named["forecast"].x) == [1000.0, 2000.0]  # from the fitted line's end on
    assert _typed_values(named["fitted trend"].x) == [0.0, 1000.0]
    shapes = fig.layout.shapes
    assert any(s.y0 == 0.85 and s.y1 == 0.85 for s in shapes)  # the limit line
    assert any(s.x0 == 700.0 and s.x1 == 700.0 for s in shapes)  # the event marker
    assert len(shapes) == 2  # an event without hours has no place on an hours axis
    html = charts.chart_html(spec, "chart-x")
    assert 'id="chart-x"' in html and "<script" in html and "plotly.min.js" not in html


def test_limit_labels_start_clear_of_an_event_that_opens_the_axis():
    """An event's label runs down the left side of its line from the top of the plot, where an upper limit's label
    sits at the left end: with an overhaul at the start of the axis (before the first reading) the limits' labels
    start a few pixels right of its line; with no event in the axis' first tenth they stay at the left end."""
    readings = {"taken_at": ["2025-01-06T08:00:00+00:00", "2025-06-02T08:10:00+00:00", "2026-11-30T07:55:00+00:00"],
                "oil_temp_c": [48.0, 61.0, 52.0]}

    def label_starts(events):
        spec = charts.temperature_figure(readings, 10.0, 80.0, events)
        labels = [a for a in spec["layout"]["annotations"] if a["text"].endswith("limit")]
        assert [a["text"] for a in labels] == ["upper limit", "lower limit"]
        assert {a["xanchor"] for a in labels} == {"left"}
        return {(a["xref"], a["x"], a.get("xshift", 0)) for a in labels}

    overhaul = {"date": "2024-12-20", "kind_label": "Overhaul"}  # 17 days before the first of 708 days of readings
    assert label_starts([overhaul]) == {("x", "2024-12-20", 6)}  # 6 px right of its line
    assert label_starts(None) == {("x domain", 0, 0)}  # the axis' left end
    assert label_starts([{"date": "2025-11-20", "kind_label": "Inspection"}]) == {("x domain", 0, 0)}  # mid-axis
    # two in the first tenth, one at the far end: clear of the later of the two
    assert label_starts([overhaul, {"date": "2025-02-15", "kind_label": "Filter change"},
                         {"date": "2026-11-29", "kind_label": "Inspection"}]) == {("x", "2025-02-15", 6)}
    # an hours axis the same way: an overhaul at the interval's start
    drain = charts.drain_figure({"hours": [100.0, 4000.0, 10000.0], "case_drain_pct": [2.0, 2.5, 3.0],
                                 "case_drain_pct_ref": [2.1, 2.4, 3.1]}, 6.0,
                                [{"chart_hours": 0.0, "kind_label": "Overhaul"}])
    assert [(a["xref"], a["x"], a["xshift"]) for a in drain["layout"]["annotations"] if a["text"] == "limit"] == [
        ("x", 0.0, 6)]


def test_efficiency_axis_keeps_the_readings_in_view_when_the_band_opens_far_ahead():
    """A band that opens to -800 % far ahead would squash the readings into a line: the axis spans the readings,
    the trend and its forecast, the limit and the band over the readings, and never goes below zero."""
    readings = {"hours": [0.0, 500.0, 1000.0], "eta_v": [0.93, 0.92, 0.91], "eta_v_ref": [0.95, 0.94, 0.93]}
    band = {"hours": [0.0, 1000.0, 20000.0], "mean": [0.95, 0.93, 0.89], "low": [0.94, 0.92, -8.0],
            "high": [0.96, 0.94, 1.5], "forecast": [False, False, True]}
    spec = charts.efficiency_figure(readings, band, 0.85, None)
    low, high = go.Figure(data=spec["data"], layout=spec["layout"]).layout.yaxis.range
    assert 0.0 < low < 0.85 and 0.96 < high < 1.0  # limit and fitted band inside, the far band's -800 % outside
    steep = {**band, "mean": [0.95, 0.93, -0.4]}  # a forecast running below zero: the axis stops at zero
    assert charts.efficiency_figure(readings, steep, 0.85, None)["layout"]["yaxis"]["range"][0] == 0.0


PAST_PUMP = "EY-401"  # invented demo plant: an axial piston pump worn past its limit
FAR_PUMP = "EY-105"  # invented demo plant: a vane pump whose slow trend puts its limit decades away


def test_wear_shape_is_said_in_words_with_its_weight(client):
    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    head = data["headline"]
    assert head["wear_law"] in head["wear_law_weights"]
    assert sum(head["wear_law_weights"].values()) == pytest.approx(1.0)
    share = head["wear_law_weights"][head["wear_law"]]
    assert head["wear_shape"].endswith(f"(weight {share:.0%} among the wear laws compared).")
    html = client.get(f"/pumps/{PISTON_PUMP}").get_data(as_text=True)
    assert head["wear_shape"] in html


def test_efficiency_band_is_the_model_averaged_one(client, demo_db):
    """The chart's band is the averaged band of the wear laws, which meets the limit at the analysis' own bounds
    (fleet.trend.remaining_life.averaged_band; both come from the same mixture)."""
    from fleet.services.analysis import analyse
    from fleet.trend.remaining_life import averaged_band

    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    with demo_db.sessions() as session:
        analysis = analyse(session, None)
    pump_id = int(analysis.results.index[analysis.results["pump"] == PISTON_PUMP][0])
    current = analysis.results.loc[pump_id, "interval_no"]
    fit = analysis.fits[(analysis.fits["pump_id"] == pump_id) & (analysis.fits["interval_no"] == current)].iloc[0]
    points = pd.DataFrame(data["trend"]["points"])
    grid = points["hours"].to_numpy() - data["trend"]["interval_start_hours"]
    expected = averaged_band(fit, grid, data["pump"]["rated_flow_lpm"], data["trend"]["confidence"], "slip")
    assert points["low"].to_numpy() == pytest.approx(expected["low"].to_numpy(), rel=1e-6)
    assert points["high"].to_numpy() == pytest.approx(expected["high"].to_numpy(), rel=1e-6)
    assert data["headline"]["wear_law_weights"]["exponential"] < 1.0  # more than one law in the band


def test_pump_past_its_limit_says_when_it_crossed_with_bounds(client):
    data = client.get(f"/pumps/{PAST_PUMP}.json").get_json()
    head = data["headline"]
    assert head["status"] == "past_limit"
    assert head["crossed_date_low"] <= head["crossed_date"] <= head["crossed_date_high"] < head["last_reading_at"]
    html = client.get(f"/pumps/{PAST_PUMP}").get_data(as_text=True)
    assert "Limit crossed (own trend)" in html
    assert f"around {head['crossed_date']}" in html
    assert f"between {head['crossed_date_low']} and {head['crossed_date_high']}" in html


def test_forecast_beyond_ten_years_is_words_on_the_page_and_numbers_in_json(client):
    from fleet.horizon import horizon_end

    data = client.get(f"/pumps/{FAR_PUMP}.json").get_json()
    head = data["headline"]
    assert head["limit_date"] > horizon_end().isoformat() and head["beyond_horizon"]
    assert head["hours_to_limit"] > 50_000  # the JSON keeps the figure (contract)
    html = client.get(f"/pumps/{FAR_PUMP}").get_data(as_text=True)
    assert "beyond 10 years" in html
    assert head["limit_date"] not in html and f"{head['hours_to_limit']:,.0f}" not in html
    listing = client.get("/?page_size=500").get_data(as_text=True)
    row = listing[listing.index(f'href="/pumps/{FAR_PUMP}"'):]
    row = row[:row.index("</tr>")]
    assert "beyond 10 years" in row and head["limit_date"] not in row


def test_an_efficiency_chart_with_nothing_referred_says_so_and_its_ticks_do_not_repeat():
    """A variable pump read without its displacement setting has no referred point: the empty chart says why, and
    its axis (the limit's few percent) is labelled to a tenth of a percent, not 85 %, 85 %, 86 %."""
    readings = {"hours": [0.0, 500.0], "eta_v": [None, None], "eta_v_ref": [None, None]}
    spec = charts.efficiency_figure(readings, None, 0.85, None)
    layout = go.Figure(data=spec["data"], layout=spec["layout"]).layout
    assert any("No reading of this pump can be referred yet" in a.text for a in layout.annotations)
    assert layout.yaxis.tickformat == ".1%"
    ticks = np.arange(layout.yaxis.range[0], layout.yaxis.range[1], 0.005)  # plotly's ticks on such an axis
    assert len({f"{t:.1%}" for t in ticks}) == len(ticks)
    wide = charts.efficiency_figure({**readings, "eta_v_ref": [0.95, 0.80]}, None, 0.85, None)
    assert wide["layout"]["yaxis"]["tickformat"] == ".0%"
    assert not any("referred yet" in a.get("text", "") for a in wide["layout"].get("annotations", []))


def test_a_sample_still_at_the_lab_is_named_and_draws_no_point(client, demo_db):
    """The latest cleanliness is the latest lab result, with its date; a newer sample still at the lab is named
    as such, not shown as a code of 'None', and has no point on the chart."""
    from fleet.services.transfer.importing import import_table
    from fleet.services.writes import perform

    before = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    reported = [s for s in before["samples"] if s["code"]]
    assert reported  # the invented demo plant's reservoirs have lab results
    machine = before["where"]["machine"]
    perform(demo_db.sessions, lambda session: import_table(session, "samples", pd.DataFrame([
        {"machine": machine, "sampled_at": "2026-11-30 09:00"}])))
    html = client.get(f"/pumps/{PISTON_PUMP}").get_data(as_text=True)
    assert f"{reported[-1]['code']} (sampled {reported[-1]['sampled_at']})" in html
    assert "the sample of 2026-11-30 has no count yet" in html and ">None" not in html
    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    assert data["samples"][-1]["code"] is None  # the twin keeps the sample itself
    figure = charts.page_charts(data)["cleanliness"]
    assert "2026-11-30" not in figure and reported[-1]["sampled_at"] in figure
