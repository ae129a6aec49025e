"""Stored analyses as the JSON contract of `fleet analyze --json` and the pages read them."""

from collections.abc import Iterable

from sqlalchemy import bindparam, select
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, Pump
from fleet.services.analysis.read_figures import prior_values, ranks
from fleet.services.analysis.store import CONTRACT_FIELDS


def pump_ids_for(session: Session, serials: Iterable[str]) -> list[int]:
    serials = list(serials)
    found = dict(session.execute(select(Pump.serial, Pump.id).where(Pump.serial.in_(serials))).all())
    missing = [s for s in serials if s not in found]
    if missing:
        raise LookupError(f"no pump {', '.join(repr(s) for s in missing)} in the register")
    return [found[s] for s in serials]


def analysis_records(session: Session, pump_ids=None) -> list[dict]:
    """Stored results, most urgent first, as JSON-ready dicts: the contract fields first, then the rest. The rank
    and the prior figures are derived as they are read (fleet.services.analysis.read_figures)."""
    statement = select(AnalysisResult, Pump.serial, Pump.kind).join(Pump, Pump.id == AnalysisResult.pump_id)
    if pump_ids is not None:
        statement = statement.where(AnalysisResult.pump_id.in_(list(pump_ids)))
    found = session.execute(statement).all()
    rank_of = ranks(session, None if pump_ids is None else [row.pump_id for row, *_ in found])
    rows = sorted(((row, serial, kind, rank_of.get(row.pump_id)) for row, serial, kind in found),
                  key=lambda r: (r[3] is None, r[3] or 0, r[1]))  # most urgent first; unkeyed rows last
    priors = prior_values(session, [kind for _, _, kind, _ in rows], [row.age_hours for row, *_ in rows])
    records = []
    for (row, serial, _, rank), prior in zip(rows, priors, strict=True):
        record = {"pump": serial}
        record.update({k: prior[k] if k in prior else getattr(row, k) for k in CONTRACT_FIELDS[1:]})
        record["rank"] = rank
        record["prior_b10_hours"] = prior["prior_b10_hours"]
        record["planning_horizon_hours"] = row.planning_horizon_hours  # not in detail
        record["computed_at"] = row.computed_at.isoformat(timespec="seconds")
        record.update({k: v for k, v in (row.detail or {}).items() if k not in record})
        records.append(record)
    return records


def statuses(session: Session, pump_ids) -> list[dict]:
    """The headline of each pump's stored analysis (what the readings API answers after a post)."""
    rows = session.execute(_HEADLINES, {"ids": list(pump_ids)})
    return [{"pump": serial, "status": status, "reasons": reasons, "eta_v_ref": eta_v_ref,
             "hours_to_limit": hours_to_limit, "limit_date": limit_date}
            for serial, status, reasons, eta_v_ref, hours_to_limit, limit_date in rows]


# The headline's columns only, built once: the whole stored row would parse its detail (every figure) for nothing.
_HEADLINES = (select(Pump.serial, AnalysisResult.status, AnalysisResult.reasons, AnalysisResult.eta_v_ref,
                     AnalysisResult.hours_to_limit, AnalysisResult.limit_date)
              .join(AnalysisResult, AnalysisResult.pump_id == Pump.id)
              .where(Pump.id.in_(bindparam("ids", expanding=True))).order_by(Pump.serial))
