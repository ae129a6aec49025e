"""The pump page draws from the stored analysis: each interval's fitted trend is kept (interval_trend), so a view
runs no wear fit, and its charts go out as plotly figure specs with compact number arrays."""

import json

import numpy as np
import plotly.graph_objects as go
import pytest
from sqlalchemy import func, select

from fleet.db.models import AnalysisResult, IntervalTrend, Pump
from fleet.physics.pump import theoretical_flow_lpm
from fleet.services.analysis import analyse
from fleet.trend.remaining_life import trend_band

PISTON_PUMP = "EY-101"  # invented demo plant: a variable axial piston pump with a case drain and a trend
# Every step of the analysis that fits or forecasts; the page may call none of them.
ENGINE = ("fleet.trend.engine.analyze_fleet", "fleet.services.analysis.compute.analyze_fleet",
          "fleet.trend.degradation.fit_degradation", "fleet.trend.engine.fit_degradation",
          "fleet.trend.wear_laws.fit_wear_laws", "fleet.trend.engine.hours_to_limits",
          "fleet.trend.remaining_life.crossing_bands", "fleet.trend.engine.assess_status")


def _specs(html: str) -> dict[str, dict]:
    specs = {}
    for part in html.split('class="fleet-chart-spec" data-for="')[1:]:
        name, rest = part.split('"', 1)
        specs[name] = json.loads(rest.split(">", 1)[1].split("</script>")[0])
    return specs


def test_every_interval_of_every_pump_keeps_its_trend(demo_db):
    with demo_db.sessions() as session:
        pumps = session.scalar(select(func.count(Pump.id)))
        current = session.scalar(select(func.count()).where(IntervalTrend.is_current))
        kept = session.scalar(select(func.count()).select_from(IntervalTrend))
        assert current == session.scalar(select(func.count()).select_from(AnalysisResult)) <= pumps
        assert kept > current  # overhauled pumps keep their earlier intervals' fits too


def test_the_pump_page_runs_no_fit_and_its_band_is_the_analysis_own(client, demo_db, monkeypatch):
    with demo_db.sessions() as session:  # the reference: the engine run afresh on this pump
        pump = session.scalar(select(Pump).where(Pump.serial == PISTON_PUMP))
        fresh = analyse(session, [pump.id])
    for name in ENGINE:
        module, attribute = name.rsplit(".", 1)
        monkeypatch.setattr(f"{module}.{attribute}", lambda *a, **k: pytest.fail("the pump page ran the analysis"))
    data = client.get(f"/pumps/{PISTON_PUMP}.json").get_json()
    assert client.get(f"/pumps/{PISTON_PUMP}").status_code == 200
    trend = data["trend"]
    assert trend is not None and len(trend["points"]) > 10
    fits, intervals = fresh.fits, fresh.intervals
    interval_no = int(intervals.loc[intervals["is_current"], "interval_no"].iloc[0])
    fit = fits[fits["interval_no"] == interval_no].iloc[0]
    assert trend["interval_no"] == interval_no
    grid = np.array([p["hours"] for p in trend["points"]]) - trend["interval_start_hours"]
    expected = trend_band(fit, grid, theoretical_flow_lpm(pump.displacement_cc, pump.rated_speed_rpm),
                          fresh.settings.confidence, "slip")
    for column in ("mean", "low", "high"):
        got = np.array([p[column] for p in trend["points"]], dtype=float)
        np.testing.assert_allclose(got, expected[column].to_numpy(float), rtol=1e-9)
    assert trend["limit_hours"] == pytest.approx(float(fit["slip_crossing_hours"]) + trend["interval_start_hours"],
                                                 rel=1e-12)


def test_the_charts_are_valid_plotly_specs_with_compact_arrays(client):
    specs = _specs(client.get(f"/pumps/{PISTON_PUMP}").get_data(as_text=True))
    assert {"chart-efficiency", "chart-drain", "chart-temperature"} <= set(specs)
    for name, spec in specs.items():
        go.Figure(data=spec["data"], layout=spec["layout"])  # plotly's own validators: raises on a bad spec
        for trace in spec["data"]:
            for axis in ("x", "y"):
                values = trace.get(axis)
                # Numbers go as one typed array (plotly's dtype + base64 form), times as one list of text,
                # never one dict per point.
                if isinstance(values, dict):
                    assert set(values) >= {"dtype", "bdata"}, (name, axis)
                else:
                    assert isinstance(values, list) and not any(isinstance(v, dict | list) for v in values)
    efficiency = specs["chart-efficiency"]["data"]
    assert isinstance(efficiency[0]["x"], dict)  # the readings' hours: numbers, so a typed array


@pytest.mark.parametrize("shape_prior", ["flat", "pooled"])
def test_a_kept_fit_leaves_out_the_members_without_weight_and_draws_the_same_band(demo_db, shape_prior):
    # A member whose weight (and centre weight, with the pooled shape prior) is exactly 0 moves neither forecast
    # nor band, so the kept fit leaves its line out; read back, every band must be the full fit's to the last bit.
    import orjson

    from fleet.trend.interval_trends import fit_row, interval_trends
    from fleet.trend.settings import AnalysisSettings
    from fleet.trend.wear_laws import MEMBERS

    with demo_db.sessions() as session:
        pumps = list(session.scalars(select(Pump.id)))
        fresh = analyse(session, pumps, settings=AnalysisSettings(shape_prior=shape_prior))
    trends = interval_trends(fresh.fit_columns(), fresh.intervals, 0.9)
    fits = fresh.fits
    assert list(trends["pump_id"]) == list(fits["pump_id"]) and any("centre_weight" in c for c in fits) == (
        shape_prior == "pooled")
    left_out = banded = 0
    for i, kept in enumerate(trends["fit"]):
        full = fits.iloc[i]
        stored = orjson.loads(orjson.dumps(kept))  # as the database gives it back
        for member in MEMBERS:
            weighed = any(float(full.get(f"slip_{member.name}_{w}", 0.0)) != 0.0 for w in ("weight", "centre_weight"))
            assert (f"slip_{member.name}_a" in stored) == (weighed or member is MEMBERS[0]), (i, member.name)
            left_out += not weighed
        if not trends["enough_data"].iloc[i]:
            continue
        back = fit_row(stored, int(full["interval_no"]), trends["start_hours"].iloc[i], full["current_hours"])
        grid = np.linspace(0.0, 3.0 * max(float(full["current_hours"]), 100.0), 40)
        ours, theirs = trend_band(back.to_dict(), grid, 100.0, 0.9), trend_band(full, grid, 100.0, 0.9)
        for column in ("mean", "low", "high"):
            np.testing.assert_array_equal(ours[column].to_numpy(float), theirs[column].to_numpy(float))
        banded += 1
    assert banded > 20 and left_out > len(trends) * len(MEMBERS) // 4  # over a third of the lines, on this plant
