"""Everything the pump page shows about one pump, as one JSON-ready dict (the page, its JSON and its CSV).

The headline figures are the stored analysis (the same the service list shows), and so is the trend: each
interval's fitted lines are kept with the analysis (interval_trend), and the band is drawn from them. Only the
per-reading part is computed here, referral and service intervals for this one pump; no wear fit runs. The pump's
rows come from a few plain queries (``pump_rows``), and the readings table is built column by column.
"""

import math
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet import units
from fleet.db.models import AnalysisResult, IntervalTrend, OilSample, Pump, Site
from fleet.db.queries import corrected_readings, pump_by_serial
from fleet.horizon import is_beyond
from fleet.io.localtime import iso_local, zone
from fleet.jsonvalues import json_ready
from fleet.kinds import EVENT_KINDS, PUMP_KINDS
from fleet.physics.cleanliness import Iso4406Code
from fleet.physics.pump import baseline_flow_lpm, theoretical_flow_lpm
from fleet.services.analysis.read_figures import prior_values, ranks
from fleet.services.pages.pump_rows import PumpRows, pump_rows
from fleet.services.sitelocal import of_site
from fleet.timeutil import utcnow
from fleet.trend.engine import place_readings
from fleet.trend.interval_trends import fit_row
from fleet.trend.remaining_life import trend_band
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import wear_shape_sentence

# Columns of the readings table and of the page's CSV twin, in order: raw values, then referred ones.
READING_COLUMNS = (
    "reading_id", "taken_at", "hours", "interval_no", "outlet_pressure_bar", "speed_rpm", "outlet_flow_lpm",
    "case_drain_lpm", "oil_temp_c", "stroke", "eta_v", "eta_v_ref", "case_drain_pct", "case_drain_ref_lpm",
    "case_drain_pct_ref", "flag", "source", "taken_by", "corrected",
)
LIMIT_FIELDS = ("eta_v_limit", "drain_limit_pct", "oil_temp_min_c", "oil_temp_max_c", "cleanliness_target",
                "reading_interval_days", "planning_horizon_weeks")
HEADLINE_FIELDS = ("status", "reasons", "rank", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref",
                   "hours_to_limit", "hours_to_limit_low", "hours_to_limit_high", "limit_date", "governing_limit",
                   "prior_hours_to_overhaul", "prior_b10_hours", "energy_cost_per_year")
DETAIL_FIELDS = ("limit_date_low", "limit_date_high", "confidence", "upper_bound_open", "currency", "leakage_kw",
                 "overhaul_saving_per_year", "overhaul_payback_years", "data_note",
                 "last_reading_at", "hours_per_day", "cleanliness_code", "wear_law", "wear_law_weights", "wear_power",
                 "crossed_limit", "crossed_at_hours", "crossed_at_hours_low", "crossed_at_hours_high", "crossed_date",
                 "crossed_date_low", "crossed_date_high")
BAND_POINTS = 60
# How far past the last reading the forecast is drawn when the trend never reaches its limit (our choice).
FORECAST_MIN_HOURS = 2000.0


def pump_page(session: Session, serial: str) -> dict | None:
    """The pump page's data; None when no pump has that serial."""
    pump = pump_by_serial(session, serial)
    if pump is None:
        return None
    rows = pump_rows(session, pump, as_of=utcnow())
    site = of_site(None if rows.last_site_id is None else session.get(Site, rows.last_site_id))
    zone_text = site.time_zone
    referred, _ = place_readings(rows.pumps, rows.readings, rows.events, rows.flow_points, AnalysisSettings())
    referred = referred.sort_values("taken_at", kind="stable")
    limits = rows.pumps.iloc[0]
    here = rows.here
    current_fit = _current_fit(session, pump.id)
    data = json_ready({
        "pump": _rated(pump),
        "where": None if here is None else {"site": here.site, "machine": here.machine, "position": here.position,
                                            "currency": session.get(Site, here.site_id).currency},
        "oil": None if here is None else here.oil,
        "limits": {name: limits.get(name) for name in LIMIT_FIELDS},
        "headline": _headline(session, pump.id),
        "site_units": {"time_zone": zone_text, "pressure": site.pressure_unit, "flow": site.flow_unit,
                       "temperature": site.temperature_unit},
        "installations": _installations(rows, zone_text),
        "events": _place_events(rows.all_events, referred),
        "trend": _trend(current_fit, pump),
        "samples": _samples(session, None if here is None else here.machine_id),
        "flow_test": _flow_test(pump, rows, referred, current_fit, zone_text),
    })
    data["readings"] = _reading_rows(session, rows, referred, zone_text)  # plain already: the bulk of the page
    return data


def _rated(pump: Pump) -> dict:
    return {
        "serial": pump.serial, "kind": pump.kind, "kind_label": PUMP_KINDS.get(pump.kind, pump.kind),
        "variable": pump.variable, "displacement_cc": pump.displacement_cc, "rated_speed_rpm": pump.rated_speed_rpm,
        "rated_pressure_bar": pump.rated_pressure_bar,
        "rated_flow_lpm": theoretical_flow_lpm(pump.displacement_cc, pump.rated_speed_rpm),
        "max_flow_lpm": pump.max_flow, "case_drain": pump.case_drain,
        "reference_temp_c": pump.reference_temp_c, "overhaul_cost": pump.overhaul_cost, "note": pump.note,
    }


def _headline(session: Session, pump_id: int) -> dict | None:
    result = session.get(AnalysisResult, pump_id)
    if result is None:
        return None
    detail = result.detail or {}
    derived = {"rank": ranks(session, [pump_id]).get(pump_id),  # derived when read (read_figures)
               **prior_values(session, [session.get(Pump, pump_id).kind], [result.age_hours])[0]}
    headline = {name: derived[name] if name in derived else getattr(result, name) for name in HEADLINE_FIELDS}
    headline.update({name: detail.get(name) for name in DETAIL_FIELDS})
    law = headline["wear_law"]
    power = headline["wear_power"]
    headline["wear_shape"] = None if law is None else wear_shape_sentence(
        law, headline["wear_law_weights"], float("nan") if power is None else power)
    headline["beyond_horizon"] = is_beyond(headline["limit_date"], headline["hours_to_limit"])
    headline["computed_at"] = result.computed_at.isoformat(timespec="seconds")
    return headline


def _installations(rows: PumpRows, zone_text: str) -> list[dict]:
    return [{"site": stay.site, "machine": stay.machine, "position": stay.position,
             "installed_at": iso_local(stay.installed_at, zone_text, "minutes"),
             "installed_hours": stay.installed_hours, "removed_at": iso_local(stay.removed_at, zone_text, "minutes"),
             "removed_hours": stay.removed_hours} for stay in rows.stays]


def _place_events(events: pd.DataFrame, referred: pd.DataFrame) -> list[dict]:
    """Events with an hour-meter position for the hours charts: as recorded, else interpolated from readings."""
    if events.empty:
        return []
    hours = events["hours"].to_numpy(float)
    if len(referred):
        stamps = pd.to_datetime(referred["taken_at"]).astype("int64").to_numpy(float)
        when = events["date"].astype("int64").to_numpy(float)
        guessed = np.interp(when, stamps, referred["hours"].to_numpy(float))
        hours = np.where(np.isfinite(hours), hours, guessed)
    return [{"event_id": event_id, "date": f"{date:%Y-%m-%d}", "hours": recorded, "kind": kind,
             "kind_label": EVENT_KINDS.get(kind, kind), "cost": cost, "downtime_h": downtime, "failure_mode": mode,
             "note": note, "chart_hours": placed}
            for event_id, date, recorded, kind, cost, downtime, mode, note, placed in zip(
                events["event_id"], events["date"], events["hours"], events["kind"], events["cost"],
                events["downtime_h"], events["failure_mode"], events["note"], hours, strict=True)]


def local_minutes(stamps, zone_text: str | None) -> np.ndarray:
    """Naive-UTC times as the site's local time with its offset, to the minute, over a whole column: what
    ``iso_local(moment, zone_text, "minutes")`` writes for each ('2026-01-15T08:00-06:00')."""
    utc = pd.DatetimeIndex(stamps).as_unit("ns")
    wall = utc.tz_localize("UTC").tz_convert(zone(zone_text)).tz_localize(None)
    seconds = ((wall - utc) // pd.Timedelta(seconds=1)).to_numpy(np.int64)
    offsets, which = np.unique(seconds, return_inverse=True)
    # each offset as datetime.isoformat writes it ('+05:45'; seconds too where a zone's history has them)
    texts = np.array([datetime(2000, 1, 1, tzinfo=timezone(timedelta(seconds=int(s)))).isoformat(
        timespec="minutes")[len("2000-01-01T00:00"):] for s in offsets], dtype=object)
    return np.asarray(np.datetime_as_string(wall.to_numpy(), unit="m"), dtype=object) + texts[which]


def _plain_list(values) -> list:
    """A column as JSON values: Python numbers and text, None for NaN, infinity and missing (as json_ready)."""
    array = np.asarray(values)
    if array.dtype.kind == "f":
        out = array.astype(object)
        out[~np.isfinite(array)] = None
        return out.tolist()
    if array.dtype.kind in "iub":
        return array.tolist()
    return [None if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)) else v
            for v in array.tolist()]


def _reading_rows(session: Session, rows: PumpRows, referred: pd.DataFrame, zone_text: str) -> list[dict]:
    """The readings table, built column by column and turned into rows once."""
    if referred.empty:
        return []
    ids = referred["reading_id"].to_numpy(np.int64)
    extras = rows.reading_extras.reindex(ids)
    with np.errstate(invalid="ignore", divide="ignore"):
        drain_pct = 100.0 * referred["drain_lpm"].to_numpy(float) / referred["max_flow_lpm"].to_numpy(float)
    corrected = corrected_readings(session, ids)
    columns = {
        "reading_id": ids.tolist(),
        # the site's local time with its offset, ISO 8601 (as fleet.io.localtime.iso_local)
        "taken_at": local_minutes(referred["taken_at"], zone_text).tolist(),
        "hours": referred["hours"], "interval_no": referred["interval_no"],
        "outlet_pressure_bar": referred["pressure_bar"], "speed_rpm": referred["speed_rpm"],
        "outlet_flow_lpm": referred["flow_lpm"], "case_drain_lpm": referred["drain_lpm"],
        "oil_temp_c": referred["temp_c"], "stroke": referred["stroke"], "eta_v": referred["eta_v"],
        "eta_v_ref": referred["eta_v_ref"], "case_drain_pct": drain_pct,
        "case_drain_ref_lpm": referred["drain_ref_lpm"], "case_drain_pct_ref": referred["drain_pct_ref"],
        "flag": referred["flag"], "source": extras["source"], "taken_by": extras["taken_by"],
        "corrected": [i in corrected for i in ids.tolist()],
    }
    values = [v if isinstance(v, list) else _plain_list(v) for v in (columns[name] for name in READING_COLUMNS)]
    return [dict(zip(READING_COLUMNS, row, strict=True)) for row in zip(*values, strict=True)]


def _current_fit(session: Session, pump_id: int) -> dict | None:
    """The stored fit of the pump's current service interval (as one row of the engine's fits), or None."""
    kept = session.scalar(select(IntervalTrend).where(IntervalTrend.pump_id == pump_id, IntervalTrend.is_current))
    if kept is None:
        return None
    # as a plain mapping: the band reads each of the wear laws' members' fields, a dict lookup each
    return fit_row(kept.fit, kept.interval_no, kept.start_hours, kept.current_hours).to_dict()


def _trend(fit: dict | None, pump: Pump) -> dict | None:
    """The fitted eta_v,ref line of the current interval, its band, and its forecast to the limit."""
    if fit is None or fit["slip_enough_data"] is not True:
        return None
    confidence = float(fit["confidence"])
    now_h = float(fit["current_hours"])
    crossing = float(fit["slip_crossing_hours"])
    end_h = crossing if np.isfinite(crossing) and crossing > now_h else now_h + max(FORECAST_MIN_HOURS, now_h)
    end_h = min(end_h, now_h + 4 * max(now_h, FORECAST_MIN_HOURS))  # a flat trend would run off to infinity
    grid = np.unique(np.concatenate([np.linspace(0.0, end_h, BAND_POINTS), [now_h]]))
    band = trend_band(fit, grid, theoretical_flow_lpm(pump.displacement_cc, pump.rated_speed_rpm), confidence, "slip")
    start_h = float(fit["start_hours"]) if np.isfinite(float(fit["start_hours"])) else 0.0
    band = band.assign(hours=band["hours"] + start_h, forecast=grid > now_h)
    return {"interval_no": int(fit["interval_no"]), "interval_start_hours": start_h, "now_hours": now_h + start_h,
            "limit_hours": crossing + start_h if np.isfinite(crossing) else None, "confidence": confidence,
            "points": band.to_dict(orient="records")}


def _samples(session: Session, machine_id: int | None) -> list[dict]:
    """Lab results of the reservoir the pump sits in now (a result belongs to the oil, not to one pump)."""
    if machine_id is None:
        return []
    rows = session.scalars(select(OilSample).where(OilSample.machine_id == machine_id)
                           .order_by(OilSample.sampled_at)).all()
    return [{"sampled_at": _iso(s.sampled_at, date_only=True), "reported_at": _iso(s.reported_at, date_only=True),
             "code_4": s.code_4, "code_6": s.code_6, "code_14": s.code_14, "code": _code(s),
             "water_ppm": s.water_ppm, "viscosity_40": s.viscosity_40, "lab_ref": s.lab_ref} for s in rows]


def _code(sample: OilSample) -> str | None:
    if sample.code_6 is None or sample.code_14 is None:
        return None
    try:
        return str(Iso4406Code(sample.code_4, sample.code_6, sample.code_14, low_count=bool(sample.low_count)))
    except ValueError:  # a lab typo (channels rising): show the numbers as reported
        return "/".join("-" if c is None else str(c) for c in (sample.code_4, sample.code_6, sample.code_14))


def _flow_test(pump: Pump, rows: PumpRows, referred: pd.DataFrame, fit: dict | None, zone_text: str
               ) -> dict | None:
    """The latest multi-point flow test, and the line a pump with the interval's first fitted slip would give."""
    tested = rows.all_readings[rows.all_readings["reading_id"].isin(rows.all_flow_points["reading_id"])]
    if tested.empty:
        return None
    latest = tested.iloc[int(np.argmax(tested["taken_at"].to_numpy()))]
    found = rows.all_flow_points[rows.all_flow_points["reading_id"] == latest["reading_id"]]
    found = found.iloc[np.argsort(found["pressure_bar"].to_numpy(float), kind="stable")]
    points = list(zip(found["pressure_bar"].tolist(), found["flow_lpm"].tolist(), strict=True))
    reading = referred[referred["reading_id"] == latest["reading_id"]]
    ratio = 1.0
    if len(reading):
        mu, mu_ref = float(reading["mu_pas"].iloc[0]), float(reading["mu_ref_pas"].iloc[0])
        ratio = mu_ref / mu if np.isfinite(mu) and np.isfinite(mu_ref) and mu > 0 else 1.0
    slip_rated, source = _baseline_slip(pump, fit)
    top = max([p for p, _ in points] + [pump.rated_pressure_bar])
    pressures = np.linspace(0.0, top, 11)
    flows = baseline_flow_lpm(pump.displacement_cc, float(latest["speed_rpm"]), slip_rated, pump.rated_pressure_bar,
                              pressures, ratio)
    return {
        "taken_at": local_minutes([latest["taken_at"]], zone_text)[0], "speed_rpm": float(latest["speed_rpm"]),
        "oil_temp_c": float(latest["temp_c"]),
        "points": [{"pressure_bar": p, "flow_lpm": q} for p, q in points],
        "baseline": [{"pressure_bar": p, "flow_lpm": q} for p, q in zip(pressures, flows, strict=True)],
        "baseline_from": source, "baseline_slip_at_rated_lpm": slip_rated,
    }


def _baseline_slip(pump: Pump, fit: dict | None) -> tuple[float, str]:
    """Referred slip at rated pressure the baseline assumes, and where it comes from."""
    if fit is not None and fit["slip_enough_data"] is True and np.isfinite(float(fit["slip_a"])):
        return float(np.exp(float(fit["slip_a"]))), "the start of this service interval's fitted trend"
    theoretical = theoretical_flow_lpm(pump.displacement_cc, pump.rated_speed_rpm)
    if pump.max_flow_lpm is not None and pump.max_flow_lpm < theoretical:
        return theoretical - pump.max_flow_lpm, "the rated maximum flow"
    return 0.0, "theoretical flow only (no trend yet and no rated maximum flow below it)"


def _iso(moment: datetime | None, date_only: bool = False) -> str | None:
    if moment is None:
        return None
    return moment.strftime("%Y-%m-%d") if date_only else moment.isoformat(sep=" ", timespec="minutes")


# The readings columns a site's units change, their quantity and the name they take ('outlet_pressure [psi]').
SITE_UNIT_COLUMNS = {"outlet_pressure_bar": ("pressure", "outlet_pressure"), "outlet_flow_lpm": ("flow", "outlet_flow"),
                     "case_drain_lpm": ("flow", "case_drain"), "oil_temp_c": ("temperature", "oil_temp")}


def readings_in_site_units(data: dict) -> tuple[list[dict], tuple[str, ...]]:
    """The readings table with pressure, flow and temperature in the site's units, the unit in each column's
    header (``?units=site`` on the page's CSV and JSON twins); the other columns as they are."""
    site_units = data["site_units"]
    renamed = {name: f"{new} [{site_units[quantity]}]" for name, (quantity, new) in SITE_UNIT_COLUMNS.items()}
    rows = []
    for row in data["readings"]:
        out = {}
        for name in READING_COLUMNS:
            if name in renamed:
                quantity = SITE_UNIT_COLUMNS[name][0]
                value = row[name]
                out[renamed[name]] = None if value is None else \
                    float(units.significant(units.from_canonical([value], quantity, site_units[quantity]))[0])
            else:
                out[name] = row[name]
        rows.append(out)
    return rows, tuple(renamed.get(name, name) for name in READING_COLUMNS)
