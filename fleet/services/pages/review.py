"""The weekly review: what changed in one week, for the reliability engineer. One plain dict, JSON-ready.

A week is the seven days ending on a chosen day (that day included), or the seven days up to now.

How it counts (each from the stored rows of the week, [start, end)):

- **Status changes**: status_change rows whose status differs from the previous one (a first analysis counts).
  A row written only because the reasons changed is no status change: its new reasons are listed under
  **New reasons**, and the row itself under ``reason_changes``.
- **Limits crossed**: the pumps whose status became past_limit in the week, each once (its first crossing).
  **Still past their limit**: the other pumps past their limit at the end of the week (for the last 7 days: in
  their stored analysis now; for a chosen week: by their last status change before its end), so no pump past a
  limit is left out of the review.
- **Lab results late**: samples taken more than ``lab_late_days`` before the end of the week and not reported by
  then; the days waiting are whole days at the end of the week, from ``lab_days_waiting``, the function the
  analysis's sentence uses, and each row carries that sentence.
- **Maintenance done**: maintenance events dated in the week, with cost (per site currency) and downtime totals.
- **Pumps installed or removed**: installation rows that began or ended in the week.
- **Readings corrected**: audit records of an update to a reading made in the week, with the fields changed
  (old -> new) and the reason given.
"""

from datetime import date, datetime, time, timedelta

import numpy as np
import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from fleet.db.models import (
    AnalysisResult,
    AuditRecord,
    Installation,
    Machine,
    MaintenanceEvent,
    OilSample,
    Position,
    Pump,
    Reading,
    Site,
    StatusChange,
)
from fleet.services.analysis.frames import installation_history, load_pumps
from fleet.timeutil import utcnow
from fleet.trend.oil_condition import lab_days_waiting, lab_late_sentence
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
    "still_past_limit": "Still past their limit",
    "maintenance": "Maintenance done",
    "installation": "Pumps installed or removed",
    "reading_corrected": "Readings corrected",
    "round_missed": "Rounds missed",
    "lab_late": "Lab results late",
    "energy_loss": "Largest energy losses",
}
# Readings' columns as a correction names them.
READING_FIELDS = {"taken_at": "taken at", "hours": "hours", "pressure_bar": "outlet pressure",
                  "speed_rpm": "speed", "flow_lpm": "outlet flow", "drain_lpm": "case drain flow",
                  "temp_c": "oil temperature", "stroke": "stroke", "taken_by": "taken by", "note": "note",
                  "source": "source", "pump_id": "pump"}


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
    rows = _status_changes(session, start, end, where)
    changes = [c for c in rows if c["status"] != c["previous_status"]]
    reason_changes = [c for c in rows if c["status"] == c["previous_status"]]
    new_reasons = [{"pump": c["pump"], "site": c["site"], "machine": c["machine"], "at": c["at"],
                    "status": c["status"], "reason": reason} for c in rows for reason in c["new_reasons"]]
    crossed = _limits_crossed(changes)
    still = _still_past_limit(session, start, end, week_end is None, where, {c["pump_id"] for c in crossed})
    maintenance = _maintenance(session, start, end, where)
    moves = _installations(session, start, end)
    corrections = _readings_corrected(session, start, end, where)
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
                   "still_past_limit": len(still), "maintenance": len(maintenance), "installation": len(moves),
                   "reading_corrected": len(corrections), "round_missed": len(missed), "lab_late": len(late),
                   "energy_loss": len(energy)},
        "status_changes": [_public(c) for c in changes],
        "reason_changes": [_public(c) for c in reason_changes],
        "new_reasons": new_reasons,
        "limits_crossed": [_public(c) for c in crossed],
        "still_past_limit": still,
        "maintenance": maintenance,
        "maintenance_totals": _maintenance_totals(maintenance),
        "installations": moves,
        "readings_corrected": corrections,
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
            "pump_id": row.pump_id,
            "pump": serial, "site": site, "machine": machine, "at": row.at.isoformat(timespec="minutes"),
            "status": row.status, "previous_status": row.previous_status,
            "direction": _direction(row.previous_status, row.status),
            "reasons": list(row.reasons or []), "new_reasons": list(row.new_reasons or []),
            "eta_v_ref": row.eta_v_ref, "hours_to_limit": row.hours_to_limit, "limit_date": row.limit_date,
        })
    return out


def _public(change: dict) -> dict:
    return {k: v for k, v in change.items() if k != "pump_id"}


def _limits_crossed(changes: list[dict]) -> list[dict]:
    """Each pump whose status became past_limit in the week, once, at its first crossing."""
    out, seen = [], set()
    for change in changes:
        if change["status"] == "past_limit" and change["pump_id"] not in seen:
            seen.add(change["pump_id"])
            out.append(change)
    return out


def _still_past_limit(session: Session, start: datetime, end: datetime, up_to_now: bool, where: dict,
                      crossed: set[int]) -> list[dict]:
    """Pumps past their limit at the end of the week that did not cross in it: by their stored analysis for the
    last 7 days, else by their last status change before the week's end."""
    if up_to_now:
        past = {row.pump_id: row for row in session.scalars(select(AnalysisResult)
                                                            .where(AnalysisResult.status == "past_limit"))}
        status_now = {pump_id: (row.reasons or [], row.eta_v_ref, row.limit_date) for pump_id, row in past.items()}
    else:
        latest = select(StatusChange.pump_id, func.max(StatusChange.at).label("at")).where(StatusChange.at < end) \
            .group_by(StatusChange.pump_id).subquery()
        rows = session.scalars(select(StatusChange).join(latest, (latest.c.pump_id == StatusChange.pump_id)
                                                         & (latest.c.at == StatusChange.at)))
        status_now = {row.pump_id: (row.reasons or [], row.eta_v_ref, row.limit_date) for row in rows
                      if row.status == "past_limit"}
    since = dict(session.execute(
        select(StatusChange.pump_id, func.max(StatusChange.at))
        .where(StatusChange.status == "past_limit", StatusChange.at < end,
               (StatusChange.previous_status.is_(None)) | (StatusChange.previous_status != "past_limit"))
        .group_by(StatusChange.pump_id)).all())
    out = []
    for pump_id, (reasons, eta_v_ref, limit_date) in status_now.items():
        if pump_id in crossed:
            continue
        serial, site, machine = where.get(pump_id, (None, None, None))
        out.append({"pump": serial, "site": site, "machine": machine, "status": "past_limit",
                    "past_limit_since": since[pump_id].isoformat(timespec="minutes") if pump_id in since else None,
                    "reasons": list(reasons), "eta_v_ref": eta_v_ref, "limit_date": limit_date})
    return sorted(out, key=lambda r: (r["past_limit_since"] or "", r["pump"] or ""))


def _maintenance(session: Session, start: datetime, end: datetime, where: dict) -> list[dict]:
    rows = session.execute(
        select(MaintenanceEvent, Pump.serial).join(Pump, Pump.id == MaintenanceEvent.pump_id)
        .where(MaintenanceEvent.date >= start, MaintenanceEvent.date < end)
        .order_by(MaintenanceEvent.date, Pump.serial))
    currencies = _currencies(session)
    out = []
    for event, serial in rows:
        _serial, site, machine = where.get(event.pump_id, (serial, None, None))
        out.append({"pump": serial, "site": site, "machine": machine, "date": event.date.isoformat(timespec="minutes"),
                    "kind": event.kind, "hours": event.hours, "cost": event.cost, "currency": currencies.get(site),
                    "downtime_h": event.downtime_h, "failure_mode": event.failure_mode, "note": event.note})
    return out


def _currencies(session: Session) -> dict[str, str]:
    return dict(session.execute(select(Site.name, Site.currency)).all())


def _maintenance_totals(events: list[dict]) -> dict:
    """Events by kind, cost per currency (a pump in stores has none: 'unknown'), downtime in hours."""
    by_kind: dict[str, int] = {}
    cost: dict[str, float] = {}
    for event in events:
        by_kind[event["kind"]] = by_kind.get(event["kind"], 0) + 1
        if event["cost"] is not None:
            currency = event["currency"] or "unknown"
            cost[currency] = cost.get(currency, 0.0) + event["cost"]
    downtime = [e["downtime_h"] for e in events if e["downtime_h"] is not None]
    return {"events": len(events), "by_kind": by_kind, "cost": cost,
            "downtime_h": float(sum(downtime)) if downtime else 0.0}


def _installations(session: Session, start: datetime, end: datetime) -> list[dict]:
    """Pumps put into a position or taken out of one in the week, at that position."""
    rows = session.execute(
        select(Installation, Pump.serial, Position.name, Machine.name, Site.name)
        .join(Pump, Pump.id == Installation.pump_id).join(Position, Position.id == Installation.position_id)
        .join(Machine, Machine.id == Position.machine_id).join(Site, Site.id == Machine.site_id)
        .where(((Installation.installed_at >= start) & (Installation.installed_at < end))
               | ((Installation.removed_at >= start) & (Installation.removed_at < end))))
    out = []
    for stay, serial, position, machine, site in rows:
        for what, at, hours in (("installed", stay.installed_at, stay.installed_hours),
                                ("removed", stay.removed_at, stay.removed_hours)):
            if at is not None and start <= at < end:
                out.append({"pump": serial, "site": site, "machine": machine, "position": position,
                            "what": what, "at": at.isoformat(timespec="minutes"), "hours": hours})
    return sorted(out, key=lambda r: (r["at"], r["pump"], r["what"]))


def _readings_corrected(session: Session, start: datetime, end: datetime, where: dict) -> list[dict]:
    """Updates of readings recorded in the audit trail in the week: which reading, who, what changed."""
    rows = session.scalars(select(AuditRecord).where(AuditRecord.action == "update", AuditRecord.table_name ==
                                                     "reading", AuditRecord.at >= start, AuditRecord.at < end)
                           .order_by(AuditRecord.at, AuditRecord.id))
    out = []
    for record in rows:
        before, after = record.before or {}, record.after or {}
        pump_id = after.get("pump_id", before.get("pump_id"))
        serial, site, machine = where.get(pump_id, (None, None, None))
        changed = [key for key in after if key != "id" and before.get(key) != after.get(key)]
        out.append({"pump": serial, "site": site, "machine": machine, "at": record.at.isoformat(timespec="minutes"),
                    "by": record.actor, "reading_id": record.row_id, "reason": record.reason,
                    "taken_at": str(before.get("taken_at") or after.get("taken_at") or "")[:16].replace("T", " "),
                    "changes": [{"field": READING_FIELDS.get(key, key), "before": before.get(key),
                                 "after": after.get(key)} for key in changed]})
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
        days = lab_days_waiting(sample.sampled_at, end)
        out.append({
            "site": site, "machine": machine, "sampled_at": sample.sampled_at.isoformat(timespec="minutes"),
            "lab_ref": sample.lab_ref, "days_waiting": days,
            "sentence": lab_late_sentence(sample.sampled_at, days, late_days),
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
    for p in data["still_past_limit"]:
        items.append({"section": "still_past_limit", "pump": p["pump"], "site": p["site"], "machine": p["machine"],
                      "at": p["past_limit_since"], "status": p["status"], "what": "; ".join(p["reasons"]),
                      "value": p["eta_v_ref"]})
    for e in data["maintenance"]:
        what = e["kind"] + (f" ({e['failure_mode']})" if e["failure_mode"] else "")
        if e["downtime_h"] is not None:
            what += f", {e['downtime_h']:g} h down"
        if e["cost"] is not None:
            what += f", cost {e['currency'] or ''}".rstrip()
        items.append({"section": "maintenance", "pump": e["pump"], "site": e["site"], "machine": e["machine"],
                      "at": e["date"], "what": what, "value": e["cost"]})
    for i in data["installations"]:
        items.append({"section": "installation", "pump": i["pump"], "site": i["site"], "machine": i["machine"],
                      "at": i["at"], "what": f"{i['what']} at {i['position']}", "value": i["hours"]})
    for c in data["readings_corrected"]:
        what = "; ".join(f"{x['field']} {x['before']} -> {x['after']}" for x in c["changes"])
        items.append({"section": "reading_corrected", "pump": c["pump"], "site": c["site"], "machine": c["machine"],
                      "at": c["at"], "what": f"reading of {c['taken_at']} by {c['by']}: {what}"
                                             + (f" (reason: {c['reason']})" if c["reason"] else "")})
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
