"""The weekly review: what changed in one week, for the reliability engineer. One plain dict, JSON-ready.

A week is the seven days ending on a chosen day (that day included), or the seven days up to now.
"""

from datetime import date, datetime, time, timedelta

import numpy as np
import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, Machine, OilSample, Pump, Reading, Site, StatusChange
from fleet.services.analysis.frames import installation_history, load_pumps
from fleet.timeutil import utcnow
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import STATUS_ORDER

WEEK = timedelta(days=7)
TOP_ENERGY = 10
# Columns of the CSV twin: every finding of the week, one row each, with its section.
CSV_COLUMNS = ("section", "pump", "site", "machine", "at", "status", "previous_status", "what", "value")
SECTIONS = {
    "status_change": "Status changes",
    "new_reason": "New reasons",
    "limit_crossed": "Limits crossed",
    "round_missed": "Rounds missed",
    "lab_late": "Lab results late",
    "energy_loss": "Largest energy losses",
}


def week_bounds(week_end: date | None, now: datetime | None = None) -> tuple[datetime, datetime]:
    """[start, end) of the week ending on ``week_end`` (included), else of the 7 days up to ``now``."""
    if week_end is None:
        end = now or utcnow()
    else:
        end = datetime.combine(week_end + timedelta(days=1), time())
    return end - WEEK, end


def weekly_review(session: Session, week_end: date | None = None, now: datetime | None = None,
                  lab_late_days: float | None = None) -> dict:
    start, end = week_bounds(week_end, now)
    late_days = AnalysisSettings().lab_late_days if lab_late_days is None else lab_late_days
    where = _locations(session)
    changes = _status_changes(session, start, end, where)
    new_reasons = [{"pump": c["pump"], "site": c["site"], "machine": c["machine"], "at": c["at"],
                    "status": c["status"], "reason": reason} for c in changes for reason in c["new_reasons"]]
    crossed = [c for c in changes if c["status"] == "past_limit" and c["previous_status"] != "past_limit"]
    missed = _rounds_missed(session, start, end)
    late = _lab_late(session, end, late_days)
    energy = _energy_losses(session, where)
    data = {
        "week_start": start.isoformat(timespec="minutes"),
        "week_end": end.isoformat(timespec="minutes"),
        "week": None if week_end is None else week_end.isoformat(),
        "previous_week": ((week_end or end.date()) - WEEK).isoformat(),
        "next_week": None if week_end is None else (week_end + WEEK).isoformat(),
        "lab_late_days": late_days,
        "counts": {"status_change": len(changes), "new_reason": len(new_reasons), "limit_crossed": len(crossed),
                   "round_missed": len(missed), "lab_late": len(late), "energy_loss": len(energy)},
        "status_changes": changes,
        "new_reasons": new_reasons,
        "limits_crossed": crossed,
        "rounds_missed": missed,
        "lab_late": late,
        "energy_losses": energy,
        "sections": SECTIONS,
    }
    data["items"] = _items(data)
    return data


def _locations(session: Session) -> dict[int, tuple]:
    """pump_id -> (serial, site, machine) where it is installed now."""
    history = installation_history(session)
    current = history[history["removed_at"].isna()].drop_duplicates("pump_id", keep="last").set_index("pump_id")
    out = {}
    for pump_id, serial in session.execute(select(Pump.id, Pump.serial)):
        site = current["site"].get(pump_id) if len(current) else None
        machine = current["machine"].get(pump_id) if len(current) else None
        out[pump_id] = (serial, site, machine)
    return out


def _direction(before: str | None, after: str) -> str:
    """'worse', 'better' or 'same' by the status order (past_limit first), 'first' for a first analysis."""
    if before is None:
        return "first"
    rank = {status: i for i, status in enumerate(STATUS_ORDER)}
    if before not in rank or after not in rank or rank[before] == rank[after]:
        return "same"
    return "worse" if rank[after] < rank[before] else "better"


def _status_changes(session: Session, start: datetime, end: datetime, where: dict) -> list[dict]:
    rows = session.scalars(select(StatusChange).where(StatusChange.at >= start, StatusChange.at < end)
                           .order_by(StatusChange.at, StatusChange.pump_id))
    out = []
    for row in rows:
        serial, site, machine = where.get(row.pump_id, (None, None, None))
        out.append({
            "pump": serial, "site": site, "machine": machine, "at": row.at.isoformat(timespec="minutes"),
            "status": row.status, "previous_status": row.previous_status,
            "direction": _direction(row.previous_status, row.status),
            "reasons": list(row.reasons or []), "new_reasons": list(row.new_reasons or []),
            "eta_v_ref": row.eta_v_ref, "hours_to_limit": row.hours_to_limit, "limit_date": row.limit_date,
        })
    return out


def _rounds_missed(session: Session, start: datetime, end: datetime) -> list[dict]:
    """Installed pumps with no reading in the week although their reading interval made one due by its end.

    Due = the last reading before the week (else the installation) plus the pump's reading interval.
    """
    pumps = load_pumps(session)
    pumps = pumps[pumps["machine"].notna()].set_index("pump_id")
    if pumps.empty:
        return []
    readings = pd.DataFrame(session.execute(
        select(Reading.pump_id, func.max(Reading.taken_at)).where(Reading.taken_at < start).group_by(Reading.pump_id)
    ).all(), columns=["pump_id", "last_before"]).set_index("pump_id")
    in_week = set(session.scalars(select(Reading.pump_id).where(Reading.taken_at >= start, Reading.taken_at < end)
                                  .distinct()))
    history = installation_history(session)
    installed = history[history["removed_at"].isna()].groupby("pump_id")["installed_at"].max()
    last = pd.to_datetime(readings["last_before"].reindex(pumps.index))
    since = last.where(last.notna(), installed.reindex(pumps.index))
    due = since + pd.to_timedelta(pumps["reading_interval_days"].astype(float), unit="D")
    missed = pumps[(due < pd.Timestamp(end)).to_numpy() & ~pumps.index.isin(in_week) & since.notna().to_numpy()]
    overdue_days = (pd.Timestamp(end) - due.reindex(missed.index)).dt.total_seconds() / 86400.0
    out = []
    for pump_id, row in missed.iterrows():
        out.append({
            "pump": row["pump"], "site": row["site"], "machine": row["machine"],
            "last_reading_at": None if pd.isna(last.get(pump_id)) else last[pump_id].isoformat(timespec="minutes"),
            "due_at": due[pump_id].isoformat(timespec="minutes"),
            "reading_interval_days": float(row["reading_interval_days"]),
            "days_overdue": round(float(overdue_days[pump_id]), 1),
        })
    return sorted(out, key=lambda r: (-r["days_overdue"], r["pump"]))


def _lab_late(session: Session, end: datetime, late_days: float) -> list[dict]:
    """Samples taken more than ``late_days`` before the week's end and not reported by then."""
    cutoff = end - timedelta(days=late_days)
    rows = session.execute(
        select(OilSample, Machine.name, Site.name).join(Machine, Machine.id == OilSample.machine_id)
        .join(Site, Site.id == Machine.site_id)
        .where(OilSample.sampled_at < cutoff)
        .where((OilSample.reported_at.is_(None)) | (OilSample.reported_at >= end))
        .order_by(OilSample.sampled_at)
    )
    flagged = {pump_id for pump_id, detail in session.execute(select(AnalysisResult.pump_id, AnalysisResult.detail))
               if (detail or {}).get("lab_late")}
    pumps_by_machine = _pumps_by_machine(session)
    out = []
    for sample, machine, site in rows:
        pumps = pumps_by_machine.get(sample.machine_id, [])
        out.append({
            "site": site, "machine": machine, "sampled_at": sample.sampled_at.isoformat(timespec="minutes"),
            "lab_ref": sample.lab_ref, "days_waiting": round((end - sample.sampled_at).total_seconds() / 86400, 1),
            "pumps": [serial for pump_id, serial in pumps],
            "flagged_by_analysis": [serial for pump_id, serial in pumps if pump_id in flagged],
        })
    return out


def _pumps_by_machine(session: Session) -> dict[int, list[tuple[int, str]]]:
    history = installation_history(session)
    current = history[history["removed_at"].isna()]
    serials = dict(session.execute(select(Pump.id, Pump.serial)).all())
    out: dict[int, list[tuple[int, str]]] = {}
    for machine_id, pump_id in zip(current["machine_id"], current["pump_id"], strict=True):
        out.setdefault(int(machine_id), []).append((int(pump_id), serials[int(pump_id)]))
    return out


def _energy_losses(session: Session, where: dict, top: int = TOP_ENERGY) -> list[dict]:
    rows = session.scalars(select(AnalysisResult).where(AnalysisResult.energy_cost_per_year.is_not(None))
                           .order_by(AnalysisResult.energy_cost_per_year.desc()).limit(top))
    out = []
    for row in rows:
        serial, site, machine = where.get(row.pump_id, (None, None, None))
        detail = row.detail or {}
        out.append({
            "pump": serial, "site": site, "machine": machine, "status": row.status,
            "energy_cost_per_year": row.energy_cost_per_year, "currency": detail.get("currency"),
            "leakage_kw": detail.get("leakage_kw"), "overhaul_saving_per_year": detail.get("overhaul_saving_per_year"),
            "overhaul_payback_years": detail.get("overhaul_payback_years"),
        })
    return out


def _items(data: dict) -> list[dict]:
    """Every finding as one flat row (the CSV twin)."""
    items = []
    for c in data["status_changes"]:
        items.append({"section": "status_change", "pump": c["pump"], "site": c["site"], "machine": c["machine"],
                      "at": c["at"], "status": c["status"], "previous_status": c["previous_status"],
                      "what": "; ".join(c["reasons"]), "value": c["eta_v_ref"]})
    for r in data["new_reasons"]:
        items.append({"section": "new_reason", "pump": r["pump"], "site": r["site"], "machine": r["machine"],
                      "at": r["at"], "status": r["status"], "what": r["reason"]})
    for c in data["limits_crossed"]:
        items.append({"section": "limit_crossed", "pump": c["pump"], "site": c["site"], "machine": c["machine"],
                      "at": c["at"], "status": c["status"], "previous_status": c["previous_status"],
                      "what": "; ".join(c["reasons"]), "value": c["eta_v_ref"]})
    for m in data["rounds_missed"]:
        items.append({"section": "round_missed", "pump": m["pump"], "site": m["site"], "machine": m["machine"],
                      "at": m["due_at"], "what": f"last reading {m['last_reading_at'] or 'never'}",
                      "value": m["days_overdue"]})
    for s in data["lab_late"]:
        items.append({"section": "lab_late", "pump": " ".join(s["pumps"]), "site": s["site"], "machine": s["machine"],
                      "at": s["sampled_at"], "what": f"lab ref {s['lab_ref'] or '-'}", "value": s["days_waiting"]})
    for e in data["energy_losses"]:
        items.append({"section": "energy_loss", "pump": e["pump"], "site": e["site"], "machine": e["machine"],
                      "status": e["status"], "what": f"{e['currency'] or ''} per year".strip(),
                      "value": None if e["energy_cost_per_year"] is None or not np.isfinite(e["energy_cost_per_year"])
                      else round(e["energy_cost_per_year"], 2)})
    return items
