"""Everything the pump page shows about one pump, as one JSON-ready dict (the page, its JSON and its CSV).

The headline figures are the stored analysis (the same the service list shows), and so is the trend: each
interval's fitted lines are kept with the analysis (interval_trend), and the band is drawn from them. Only the
per-reading part is computed here, referral and service intervals for this one pump; no wear fit runs.
"""

from datetime import datetime

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet import units
from fleet.db.models import (
    AnalysisResult,
    FlowTestPoint,
    Installation,
    IntervalTrend,
    Machine,
    MaintenanceEvent,
    Oil,
    OilSample,
    Position,
    Pump,
    Reading,
    Site,
)
from fleet.db.queries import corrected_readings, current_places, pump_by_serial
from fleet.horizon import is_beyond
from fleet.io.localtime import iso_local
from fleet.jsonvalues import json_ready
from fleet.kinds import EVENT_KINDS, PUMP_KINDS
from fleet.physics.cleanliness import Iso4406Code
from fleet.physics.pump import baseline_flow_lpm, theoretical_flow_lpm
from fleet.services.analysis.frames import load_frames
from fleet.services.sitelocal import of_pump
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
    site = of_pump(session, pump)
    zone_text = site.time_zone
    frames = load_frames(session, [pump.id], as_of=utcnow())
    referred, _ = place_readings(frames.pumps, frames.readings, frames.events, frames.flow_points,
                                 AnalysisSettings())
    referred = referred.sort_values("taken_at", kind="stable")
    limits = frames.pumps.iloc[0]
    events = _events(session, pump.id)
    readings = _reading_rows(session, referred, zone_text)
    current_fit = _current_fit(session, pump.id)
    data = {
        "pump": _rated(pump),
        "where": _where(session, pump.id),
        "oil": _oil(session, pump.id),
        "limits": {name: limits.get(name) for name in LIMIT_FIELDS},
        "headline": _headline(session, pump.id),
        "site_units": {"time_zone": zone_text, "pressure": site.pressure_unit, "flow": site.flow_unit,
                       "temperature": site.temperature_unit},
        "installations": _installations(session, pump.id, zone_text),
        "events": _place_events(events, referred),
        "readings": readings,
        "trend": _trend(current_fit, pump),
        "samples": _samples(session, pump.id),
        "flow_test": _flow_test(session, pump, referred, current_fit, zone_text),
    }
    return json_ready(data)


def _rated(pump: Pump) -> dict:
    return {
        "serial": pump.serial, "kind": pump.kind, "kind_label": PUMP_KINDS.get(pump.kind, pump.kind),
        "variable": pump.variable, "displacement_cc": pump.displacement_cc, "rated_speed_rpm": pump.rated_speed_rpm,
        "rated_pressure_bar": pump.rated_pressure_bar,
        "rated_flow_lpm": theoretical_flow_lpm(pump.displacement_cc, pump.rated_speed_rpm),
        "max_flow_lpm": pump.max_flow, "case_drain": pump.case_drain,
        "reference_temp_c": pump.reference_temp_c, "overhaul_cost": pump.overhaul_cost, "note": pump.note,
    }


def _where(session: Session, pump_id: int) -> dict | None:
    place = current_places(session, [pump_id]).get(pump_id)
    if place is None:
        return None
    return {"site": place.site, "machine": place.machine, "position": place.position,
            "currency": session.get(Site, place.site_id).currency}


def _current_machine_id(session: Session, pump_id: int) -> int | None:
    place = current_places(session, [pump_id]).get(pump_id)
    return None if place is None else place.machine_id


def _oil(session: Session, pump_id: int) -> dict | None:
    machine_id = _current_machine_id(session, pump_id)
    oil = None if machine_id is None else session.scalar(
        select(Oil).join(Machine, Machine.oil_id == Oil.id).where(Machine.id == machine_id))
    if oil is None:
        return None
    return {"name": oil.name, "iso_vg": oil.iso_vg, "viscosity_40": oil.viscosity_40,
            "viscosity_100": oil.viscosity_100, "density_15": oil.density_15}


def _headline(session: Session, pump_id: int) -> dict | None:
    result = session.get(AnalysisResult, pump_id)
    if result is None:
        return None
    detail = result.detail or {}
    headline = {name: getattr(result, name) for name in HEADLINE_FIELDS}
    headline.update({name: detail.get(name) for name in DETAIL_FIELDS})
    law = headline["wear_law"]
    power = headline["wear_power"]
    headline["wear_shape"] = None if law is None else wear_shape_sentence(
        law, headline["wear_law_weights"], float("nan") if power is None else power)
    headline["beyond_horizon"] = is_beyond(headline["limit_date"], headline["hours_to_limit"])
    headline["computed_at"] = result.computed_at.isoformat(timespec="seconds")
    return headline


def _installations(session: Session, pump_id: int, zone_text: str) -> list[dict]:
    rows = session.execute(
        select(Installation, Position.name, Machine.name, Site.name)
        .join(Position, Position.id == Installation.position_id).join(Machine, Machine.id == Position.machine_id)
        .join(Site, Site.id == Machine.site_id).where(Installation.pump_id == pump_id)
        .order_by(Installation.installed_at)
    )
    return [{"site": site, "machine": machine, "position": position,
             "installed_at": iso_local(stay.installed_at, zone_text, "minutes"),
             "installed_hours": stay.installed_hours, "removed_at": iso_local(stay.removed_at, zone_text, "minutes"),
             "removed_hours": stay.removed_hours} for stay, position, machine, site in rows]


def _events(session: Session, pump_id: int) -> pd.DataFrame:
    rows = session.scalars(select(MaintenanceEvent).where(MaintenanceEvent.pump_id == pump_id)
                           .order_by(MaintenanceEvent.date)).all()
    return pd.DataFrame([{
        "event_id": e.id, "date": e.date, "hours": e.hours, "kind": e.kind,
        "kind_label": EVENT_KINDS.get(e.kind, e.kind),
        "cost": e.cost, "downtime_h": e.downtime_h, "failure_mode": e.failure_mode, "note": e.note,
    } for e in rows], columns=["event_id", "date", "hours", "kind", "kind_label", "cost", "downtime_h", "failure_mode",
                               "note"])


def _place_events(events: pd.DataFrame, referred: pd.DataFrame) -> list[dict]:
    """Events with an hour-meter position for the hours charts: as recorded, else interpolated from readings."""
    if events.empty:
        return []
    hours = pd.to_numeric(events["hours"], errors="coerce").to_numpy(float)
    if len(referred):
        stamps = pd.to_datetime(referred["taken_at"]).astype("int64").to_numpy(float)
        when = pd.to_datetime(events["date"]).astype("int64").to_numpy(float)
        guessed = np.interp(when, stamps, referred["hours"].to_numpy(float))
        hours = np.where(np.isfinite(hours), hours, guessed)
    out = events.assign(chart_hours=hours, date=pd.to_datetime(events["date"]).dt.strftime("%Y-%m-%d"))
    return out.to_dict(orient="records")


def _reading_rows(session: Session, referred: pd.DataFrame, zone_text: str) -> list[dict]:
    if referred.empty:
        return []
    extra = pd.DataFrame(session.execute(
        select(Reading.id, Reading.source, Reading.taken_by).where(Reading.id.in_(
            [int(i) for i in referred["reading_id"]]))).all(), columns=["reading_id", "source", "taken_by"])
    r = referred.merge(extra, on="reading_id", how="left")
    max_flow = r["max_flow_lpm"].to_numpy(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        drain_pct = 100.0 * r["drain_lpm"].to_numpy(float) / max_flow
    table = pd.DataFrame({
        "reading_id": r["reading_id"],
        # the site's local time with its offset, ISO 8601 (fleet.io.localtime)
        "taken_at": [iso_local(moment, zone_text, "minutes") for moment in pd.to_datetime(r["taken_at"])],
        "hours": r["hours"], "interval_no": r["interval_no"], "outlet_pressure_bar": r["pressure_bar"],
        "speed_rpm": r["speed_rpm"], "outlet_flow_lpm": r["flow_lpm"], "case_drain_lpm": r["drain_lpm"],
        "oil_temp_c": r["temp_c"], "stroke": r["stroke"], "eta_v": r["eta_v"], "eta_v_ref": r["eta_v_ref"],
        "case_drain_pct": drain_pct, "case_drain_ref_lpm": r["drain_ref_lpm"], "case_drain_pct_ref": r["drain_pct_ref"],
        "flag": r["flag"], "source": r["source"], "taken_by": r["taken_by"],
        "corrected": r["reading_id"].isin(list(corrected_readings(session, r["reading_id"]))),
    })
    return json_ready(table[list(READING_COLUMNS)].astype(object).to_dict(orient="records"))


def _current_fit(session: Session, pump_id: int) -> pd.Series | None:
    """The stored fit of the pump's current service interval (as one row of the engine's fits), or None."""
    kept = session.scalar(select(IntervalTrend).where(IntervalTrend.pump_id == pump_id, IntervalTrend.is_current))
    if kept is None:
        return None
    return fit_row(kept.fit, kept.interval_no, kept.start_hours, kept.current_hours)


def _trend(fit: pd.Series | None, pump: Pump) -> dict | None:
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


def _samples(session: Session, pump_id: int) -> list[dict]:
    """Lab results of the reservoir the pump sits in now (a result belongs to the oil, not to one pump)."""
    machine_id = _current_machine_id(session, pump_id)
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


def _flow_test(session: Session, pump: Pump, referred: pd.DataFrame, fit: pd.Series | None, zone_text: str
               ) -> dict | None:
    """The latest multi-point flow test, and the line a pump with the interval's first fitted slip would give."""
    latest = session.execute(
        select(Reading.id, Reading.taken_at, Reading.speed_rpm, Reading.temp_c)
        .join(FlowTestPoint, FlowTestPoint.reading_id == Reading.id)
        .where(Reading.pump_id == pump.id).order_by(Reading.taken_at.desc()).limit(1)
    ).first()
    if latest is None:
        return None
    points = session.execute(select(FlowTestPoint.pressure_bar, FlowTestPoint.flow_lpm)
                             .where(FlowTestPoint.reading_id == latest.id)
                             .order_by(FlowTestPoint.pressure_bar)).all()
    reading = referred[referred["reading_id"] == latest.id]
    ratio = 1.0
    if len(reading):
        mu, mu_ref = float(reading["mu_pas"].iloc[0]), float(reading["mu_ref_pas"].iloc[0])
        ratio = mu_ref / mu if np.isfinite(mu) and np.isfinite(mu_ref) and mu > 0 else 1.0
    slip_rated, source = _baseline_slip(pump, fit)
    top = max([p for p, _ in points] + [pump.rated_pressure_bar])
    pressures = np.linspace(0.0, top, 11)
    flows = baseline_flow_lpm(pump.displacement_cc, latest.speed_rpm, slip_rated, pump.rated_pressure_bar,
                              pressures, ratio)
    return {
        "taken_at": iso_local(latest.taken_at, zone_text, "minutes"), "speed_rpm": latest.speed_rpm,
        "oil_temp_c": latest.temp_c,
        "points": [{"pressure_bar": p, "flow_lpm": q} for p, q in points],
        "baseline": [{"pressure_bar": p, "flow_lpm": q} for p, q in zip(pressures, flows, strict=True)],
        "baseline_from": source, "baseline_slip_at_rated_lpm": slip_rated,
    }


def _baseline_slip(pump: Pump, fit: pd.Series | None) -> tuple[float, str]:
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
                    float(units.from_canonical([value], quantity, site_units[quantity])[0])
            else:
                out[name] = row[name]
        rows.append(out)
    return rows, tuple(renamed.get(name, name) for name in READING_COLUMNS)
