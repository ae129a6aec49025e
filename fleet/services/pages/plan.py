"""The overhaul plan: forecast limit dates inside a horizon, the shutdown windows that suit them, the spares the
fleet history asks for, and what each overhaul costs and saves. One plain dict, JSON-ready; never commits."""

from datetime import datetime, timedelta

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, FleetPrior, Machine, ShutdownWindow, Site
from fleet.io import rules
from fleet.jsonvalues import plain
from fleet.kinds import PUMP_KINDS
from fleet.planning.outlook import overhaul_chances, plan_totals
from fleet.planning.spares import DEFAULT_COVER, spares_to_hold
from fleet.planning.windows import FIT_WORDS, match_windows
from fleet.services.analysis.frames import load_pumps
from fleet.services.writes.forms import Collector
from fleet.timeutil import utcnow

DEFAULT_WEEKS = 26
MAX_WEEKS = 520
# Columns of the CSV twin: one row per pump on the plan.
CSV_COLUMNS = ("pump", "kind", "site", "machine", "position", "status", "governing_limit", "limit_date",
               "limit_date_low", "limit_date_high", "hours_to_limit", "fit", "window", "window_name", "window_starts",
               "overhaul_cost", "energy_cost_per_year", "overhaul_saving_per_year", "overhaul_payback_years",
               "currency", "crossed_limit", "crossed_date", "crossed_date_low", "crossed_date_high")
# A pump past its limit: which limit its trend crossed first, and when (with bounds), estimated from its readings.
# Its limit_date is its last reading's date, which tells a planner nothing.
CROSSED_FIELDS = ("crossed_limit", "crossed_date", "crossed_date_low", "crossed_date_high")
# Digits a planner's spreadsheet needs: whole hours and money, a tenth of a year of payback.
CSV_DIGITS = {"hours_to_limit": 0, "overhaul_cost": 0, "energy_cost_per_year": 0, "overhaul_saving_per_year": 0,
              "overhaul_payback_years": 1}


def csv_rows(rows: list[dict]) -> list[dict]:
    """The plan's rows as its CSV twin gives them: figures rounded to CSV_DIGITS, each window named."""
    out = []
    for row in rows:
        row = {**row, "window_name": row.get("window_label")}
        for key, digits in CSV_DIGITS.items():
            if row.get(key) is not None:
                row[key] = round(row[key], digits) if digits else int(round(row[key]))
        out.append(row)
    return out


def overhaul_plan(session: Session, weeks: int = DEFAULT_WEEKS, now: datetime | None = None) -> dict:
    now = now or utcnow()
    weeks = int(min(max(weeks, 1), MAX_WEEKS))
    today = pd.Timestamp(now).normalize()
    horizon_end = today + pd.Timedelta(weeks=weeks)
    pumps = _pump_frame(session)
    windows = _window_frame(session)
    inside = _inside(pumps, horizon_end)
    due = pumps[inside]
    fits = (match_windows(due, windows, today, horizon_end) if len(due)
            else pd.DataFrame(columns=["fit", "window_id"]))
    window_by_id = windows.set_index("window_id") if len(windows) else windows
    rows = []
    for pump_id, pump in due.set_index("pump_id").iterrows():
        fit = fits.loc[pump_id] if pump_id in fits.index else None
        window_id = None if fit is None or pd.isna(fit["window_id"]) else int(fit["window_id"])
        window = window_by_id.loc[window_id] if window_id is not None else None
        rows.append({
            "pump": pump["pump"], "kind": pump["kind"], "kind_label": PUMP_KINDS.get(pump["kind"], pump["kind"]),
            "site": pump["site"], "machine": pump["machine"], "position": pump["position"],
            "status": pump["status"], "governing_limit": pump["governing_limit"],
            "limit_date": pump["limit_date"], "limit_date_low": pump["limit_date_low"],
            "limit_date_high": pump["limit_date_high"], "hours_to_limit": _number(pump["hours_to_limit"]),
            **{field: pump[field] for field in CROSSED_FIELDS},
            "fit": fit["fit"] if fit is not None else "no_forecast",
            "window": window_id, "window_label": None if window is None else window["label"],
            "window_starts": None if window is None else window["starts_at"].strftime("%Y-%m-%d"),
            "overhaul_cost": _number(pump["overhaul_cost"]),
            "energy_cost_per_year": _number(pump["energy_cost_per_year"]),
            "overhaul_saving_per_year": _number(pump["overhaul_saving_per_year"]),
            "overhaul_payback_years": _number(pump["overhaul_payback_years"]), "currency": pump["currency"],
        })
    rows.sort(key=lambda r: (r["crossed_date_low"] or r["crossed_date"] or r["limit_date_low"] or r["limit_date"]
                             or "9999", r["pump"]))
    return {
        "weeks": weeks,
        "today": today.strftime("%Y-%m-%d"),
        "horizon_end": horizon_end.strftime("%Y-%m-%d"),
        "pumps": rows,
        "windows": _window_rows(windows, today),
        "fit_words": FIT_WORDS,
        "at_risk": [r["pump"] for r in rows if r["fit"] in ("at_risk", "past_limit")],
        "without_forecast": _without_forecast(pumps[~inside]),
        "kinds": _kind_outlook(session, pumps, weeks),
        "spares_cover": DEFAULT_COVER,
        "totals": plan_totals([r for r in rows if r["fit"] != "beyond_horizon"]),  # overhauls planned
        "scopes": _scope_options(session),
    }


def _pump_frame(session: Session) -> pd.DataFrame:
    """Every pump with its location (load_pumps), its stored forecast and its energy figures."""
    pumps = load_pumps(session)[["pump_id", "pump", "kind", "site", "machine", "position", "site_id", "machine_id",
                                 "overhaul_cost", "currency"]]
    stored = []
    for row in session.scalars(select(AnalysisResult)):
        detail = row.detail or {}
        stored.append({
            "pump_id": row.pump_id, "status": row.status, "governing_limit": row.governing_limit,
            "limit_date": row.limit_date, "limit_date_low": detail.get("limit_date_low"),
            "limit_date_high": detail.get("limit_date_high"), "hours_to_limit": row.hours_to_limit,
            "energy_cost_per_year": row.energy_cost_per_year,
            "overhaul_saving_per_year": detail.get("overhaul_saving_per_year"),
            "overhaul_payback_years": detail.get("overhaul_payback_years"),
            "age_hours": detail.get("age_hours"), "hours_per_day": detail.get("hours_per_day"),
            "data_note": detail.get("data_note"), "last_flag": detail.get("last_flag"),
            **{field: detail.get(field) for field in CROSSED_FIELDS},
        })
    columns = ["pump_id", "status", "governing_limit", "limit_date", "limit_date_low", "limit_date_high",
               "hours_to_limit", "energy_cost_per_year", "overhaul_saving_per_year", "overhaul_payback_years",
               "age_hours", "hours_per_day", "data_note", "last_flag", *CROSSED_FIELDS]
    frame = pumps.merge(pd.DataFrame(stored, columns=columns), on="pump_id", how="left")
    frame["past_limit"] = frame["status"] == "past_limit"
    return frame.astype(object).where(frame.notna(), None)


def _without_forecast(pumps: pd.DataFrame) -> list[dict]:
    """Installed pumps with too little data for a trend of their own: the plan cannot place them, and a planner
    needs to know which (and why) as much as which pumps it places."""
    rows = pumps[pumps["machine"].notna() & pumps["data_note"].notna()].sort_values("pump")
    return [{"pump": p.pump, "kind": p.kind, "kind_label": PUMP_KINDS.get(p.kind, p.kind), "site": p.site,
             "machine": p.machine, "position": p.position, "status": p.status, "why": p.data_note,
             "last_flag": p.last_flag} for p in rows.itertuples()]


def _inside(pumps: pd.DataFrame, horizon_end: pd.Timestamp) -> np.ndarray:
    """Pumps past their limit, or whose expected date or early bound falls inside the horizon."""
    expected = pd.to_datetime(pumps["limit_date"])
    early = pd.to_datetime(pumps["limit_date_low"])
    return (pumps["past_limit"].astype(bool) | (expected <= horizon_end) | (early <= horizon_end)).to_numpy()


def _window_frame(session: Session) -> pd.DataFrame:
    rows = session.execute(
        select(ShutdownWindow, Site.name, Machine.name, Machine.site_id)
        .outerjoin(Machine, Machine.id == ShutdownWindow.machine_id)
        .outerjoin(Site, Site.id == ShutdownWindow.site_id)
        .order_by(ShutdownWindow.starts_at)
    ).all()
    sites = dict(session.execute(select(Site.id, Site.name)).all())
    records = []
    for window, site, machine, machine_site in rows:
        scope = f"{sites.get(machine_site, '')} / {machine}" if machine else f"{site} (whole site)"
        records.append({"window_id": window.id, "site_id": window.site_id, "machine_id": window.machine_id,
                        "starts_at": pd.Timestamp(window.starts_at), "ends_at": pd.Timestamp(window.ends_at),
                        "note": window.note, "scope": scope,
                        "label": f"{scope}, {window.starts_at:%Y-%m-%d}–{window.ends_at:%Y-%m-%d}"})
    columns = ["window_id", "site_id", "machine_id", "starts_at", "ends_at", "note", "scope", "label"]
    frame = pd.DataFrame(records, columns=columns)
    return frame.astype({"site_id": float, "machine_id": float})


def _window_rows(windows: pd.DataFrame, today: pd.Timestamp) -> list[dict]:
    return [{"id": int(w.window_id), "scope": w.scope, "starts_at": w.starts_at.strftime("%Y-%m-%d"),
             "ends_at": w.ends_at.strftime("%Y-%m-%d"), "note": w.note, "past": bool(w.ends_at < today)}
            for w in windows.itertuples()]


def _kind_outlook(session: Session, pumps: pd.DataFrame, weeks: int) -> list[dict]:
    """Per pump kind: the fleet Weibull, the overhauls it expects in the horizon and the spares to hold.

    Each pump's chance is P(overhaul within its running hours in the horizon | it has run age_hours since its last
    overhaul); the expected count is their sum and the spares cover that count with DEFAULT_COVER.
    """
    out = []
    for prior in session.scalars(select(FleetPrior).order_by(FleetPrior.kind)):
        detail = prior.detail or {}
        beta, alpha = detail.get("beta"), detail.get("alpha")
        of_kind = pumps[(pumps["kind"] == prior.kind) & pumps["machine"].notna()]
        row = {"kind": prior.kind, "kind_label": PUMP_KINDS.get(prior.kind, prior.kind), "pumps": int(len(of_kind)),
               "beta": beta, "alpha_hours": alpha, "b10_hours": detail.get("b10_hours"),
               "n_failures": detail.get("n_failures"), "n_suspensions": detail.get("n_suspensions"),
               "note": detail.get("note"), "expected_overhauls": None, "spares_to_hold": None}
        if beta and alpha and len(of_kind):
            chances = overhaul_chances(of_kind["age_hours"], of_kind["hours_per_day"], weeks, beta, alpha)
            row["expected_overhauls"] = float(np.nansum(chances))
            row["spares_to_hold"] = spares_to_hold(chances)
        out.append(row)
    return out


def _scope_options(session: Session) -> list[list[str]]:
    sites = [[f"site:{i}", f"{n} (whole site)"] for i, n in session.execute(select(Site.id, Site.name)
                                                                              .order_by(Site.name))]
    machines = [[f"machine:{i}", f"{s} / {m}"] for i, s, m in session.execute(
        select(Machine.id, Site.name, Machine.name).join(Site, Site.id == Machine.site_id)
        .order_by(Site.name, Machine.name))]
    return sites + machines


def add_window(session: Session, values: dict) -> ShutdownWindow:
    """Store a shutdown window from form values (scope 'site:ID' or 'machine:ID', starts_at, ends_at, note).

    Raises fleet.services.writes.forms.FormRejected naming each problem; never commits.
    """
    form = Collector(values, "windows")
    allowed = {value for value, _ in _scope_options(session)}
    scope = form.choice("scope", allowed, required=True)
    starts, ends, note = form.get("starts_at"), form.get("ends_at"), form.get("note")
    row = form.row()
    if {"starts_at", "ends_at"} <= set(row.columns):  # whole days: a window may start and end on one day
        row = row.assign(starts_at=row["starts_at"].dt.normalize(), ends_at=row["ends_at"].dt.normalize())
    form.check(rules.not_before(row, "ends_at", "starts_at", "is before the start"))
    form.raise_if_any()
    if ends == ends.replace(hour=0, minute=0):
        ends = ends + timedelta(days=1) - timedelta(minutes=1)  # a date-only end means the end of that day
    kind, _, ident = scope.partition(":")
    window = ShutdownWindow(starts_at=starts, ends_at=ends, note=note,
                            site_id=int(ident) if kind == "site" else None,
                            machine_id=int(ident) if kind == "machine" else None)
    session.add(window)
    session.flush()
    return window


def delete_window(session: Session, window_id: int) -> bool:
    window = session.get(ShutdownWindow, window_id)
    if window is None:
        return False
    session.delete(window)
    session.flush()
    return True


def _number(value) -> float | None:
    value = plain(value)
    return None if value is None else float(value)
