"""The service list: every pump with its stored analysis, most urgent first, filtered, sorted and paged."""

from dataclasses import dataclass

from sqlalchemy import func, select
from sqlalchemy.orm import Session, aliased

from fleet.db.models import AnalysisResult, Installation, Machine, Position, Pump, Site
from fleet.kinds import PUMP_KINDS
from fleet.services.analysis.read_figures import prior_values, ranks
from fleet.status_words import STATUS_LABELS

SORTS = {
    "urgency": (AnalysisResult.order_key, Pump.serial),  # the keys' order is the ranks' (read_figures)
    "pump": (Pump.serial,),
    "eta_v": (AnalysisResult.eta_v_ref, Pump.serial),
    "hours": (AnalysisResult.hours_to_limit, Pump.serial),
    "energy": (AnalysisResult.energy_cost_per_year.desc(), Pump.serial),
}
# Columns of the CSV twin, in order.
CSV_COLUMNS = ("rank", "pump", "status", "site", "machine", "position", "kind", "eta_v_ref",
               "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit", "hours_to_limit_low",
               "hours_to_limit_high", "limit_date", "limit_date_low", "limit_date_high", "governing_limit",
               "confidence", "prior_hours_to_overhaul", "energy_cost_per_year", "last_reading_at", "cleanliness_code",
               "reasons", "crossed_limit", "crossed_date")


ROW_FIELDS = ("rank", "status", "reasons", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit",
              "hours_to_limit_low", "hours_to_limit_high", "limit_date", "governing_limit", "prior_hours_to_overhaul",
              "energy_cost_per_year", "limit_date_low", "limit_date_high", "confidence", "last_reading_at",
              "cleanliness_code", "currency", "computed_at", "crossed_limit", "crossed_date")


@dataclass
class ListQuery:
    site: str | None = None
    machine: str | None = None
    kind: str | None = None
    status: str | None = None
    sort: str = "urgency"
    page: int = 1
    page_size: int = 50


def service_list(session: Session, query: ListQuery) -> dict:
    current = aliased(Installation)
    statement = (
        select(Pump, AnalysisResult, Site.name, Machine.name, Position.name)
        .outerjoin(AnalysisResult, AnalysisResult.pump_id == Pump.id)
        .outerjoin(current, (current.pump_id == Pump.id) & current.removed_at.is_(None))
        .outerjoin(Position, Position.id == current.position_id)
        .outerjoin(Machine, Machine.id == Position.machine_id)
        .outerjoin(Site, Site.id == Machine.site_id)
    )
    if query.site:
        statement = statement.where(Site.name == query.site)
    if query.machine:
        statement = statement.where(Machine.name == query.machine)
    if query.kind:
        statement = statement.where(Pump.kind == query.kind)
    if query.status:
        statement = statement.where(AnalysisResult.status == query.status)
    total = _count(session, statement, query)
    order = SORTS.get(query.sort, SORTS["urgency"])
    page = max(1, query.page)
    ordered = statement.order_by(*[o.nulls_last() if hasattr(o, "nulls_last") else o for o in order])
    whole_in_order = order is SORTS["urgency"] and not (query.site or query.machine or query.kind or query.status)
    if whole_in_order:
        # The whole list in the service order: the page's pumps found on the order keys' index first, and only
        # they joined (the joins over every pump, sorted for one page, grew with the fleet)
        ids = _urgency_page(session, (page - 1) * query.page_size, query.page_size)
        rows = session.execute(ordered.where(Pump.id.in_(ids))).all() if ids else []
    else:
        rows = session.execute(ordered.limit(query.page_size).offset((page - 1) * query.page_size)).all()
    analysed = [(pump, result) for pump, result, *_ in rows if result is not None]
    if whole_in_order:
        # The whole list in key order, keyless rows last: each keyed row's rank is its place in it.
        first = (page - 1) * query.page_size
        rank_of = {pump.id: first + n for n, (pump, result, *_) in enumerate(rows, start=1)
                   if result is not None and result.order_key is not None}
    else:
        rank_of = ranks(session, [pump.id for pump, _ in analysed])
    priors = dict(zip((pump.id for pump, _ in analysed), prior_values(
        session, [pump.kind for pump, _ in analysed], [result.age_hours for _, result in analysed]), strict=True))
    pumps = [_row(pump, result, site, machine, position, rank_of.get(pump.id), priors.get(pump.id, {}))
             for pump, result, site, machine, position in rows]
    counts = dict(session.execute(select(AnalysisResult.status, func.count()).group_by(AnalysisResult.status)).all())
    return {
        "pumps": pumps,
        "total": total,
        "page": page,
        "pages": max(1, -(-total // query.page_size)),
        "query": query.__dict__,
        "counts": {status: counts.get(status, 0) for status in STATUS_LABELS},
        "choices": _choices(session),
    }


def _urgency_page(session: Session, first: int, size: int) -> list[int]:
    """The pumps in places first + 1 .. first + size of the whole list in the service order (SORTS["urgency"]):
    the pumps with an order key by key (a key ends with the pump's name, so it alone orders them as key and
    serial do), read from the keys' index; then those without one, by serial."""
    keyed = list(session.scalars(select(AnalysisResult.pump_id).where(AnalysisResult.order_key.is_not(None))
                                 .order_by(AnalysisResult.order_key).offset(first).limit(size)))
    if len(keyed) == size:
        return keyed
    n_keyed = session.scalar(select(func.count()).where(AnalysisResult.order_key.is_not(None)))
    unkeyed = (select(Pump.id).outerjoin(AnalysisResult, AnalysisResult.pump_id == Pump.id)
               .where(AnalysisResult.order_key.is_(None)).order_by(Pump.serial)
               .offset(max(first - n_keyed, 0)).limit(size - len(keyed)))
    return keyed + list(session.scalars(unkeyed))


def _count(session: Session, statement, query: ListQuery) -> int:
    """Pumps the list holds. Without a filter on place or status that is a count of pumps (of a kind): the
    joins of the page's query, counted over every row, were a large part of the list's time at 10,000 pumps."""
    if query.site or query.machine or query.status:
        return session.scalar(select(func.count()).select_from(statement.subquery()))
    pumps = select(func.count(Pump.id))
    return session.scalar(pumps.where(Pump.kind == query.kind) if query.kind else pumps)


def _row(pump: Pump, result: AnalysisResult | None, site, machine, position, rank: int | None,
         priors: dict) -> dict:
    row = {"pump": pump.serial, "kind": pump.kind, "kind_label": PUMP_KINDS.get(pump.kind, pump.kind),
           "site": site, "machine": machine, "position": position}
    if result is None:  # registered since the last analysis: every key present, values unknown
        row.update({key: None for key in ROW_FIELDS})
        row["reasons"] = ["Not analysed yet: run 'fleet analyze'."]
        return row
    detail = result.detail or {}
    row.update({
        "rank": rank, "status": result.status, "reasons": result.reasons,
        "eta_v_ref": result.eta_v_ref, "eta_v_decline_per_1000h": result.eta_v_decline_per_1000h,
        "drain_pct_ref": result.drain_pct_ref, "hours_to_limit": result.hours_to_limit,
        "hours_to_limit_low": result.hours_to_limit_low, "hours_to_limit_high": result.hours_to_limit_high,
        "limit_date": result.limit_date, "governing_limit": result.governing_limit,
        "prior_hours_to_overhaul": priors["prior_hours_to_overhaul"],
        "energy_cost_per_year": result.energy_cost_per_year,
        "limit_date_low": detail.get("limit_date_low"), "limit_date_high": detail.get("limit_date_high"),
        "confidence": detail.get("confidence"), "last_reading_at": detail.get("last_reading_at"),
        "cleanliness_code": detail.get("cleanliness_code"), "currency": detail.get("currency"),
        "computed_at": result.computed_at.isoformat(timespec="seconds"), "crossed_date": detail.get("crossed_date"),
        "crossed_limit": detail.get("crossed_limit"),
    })
    return row


def _choices(session: Session) -> dict:
    return {
        "sites": list(session.scalars(select(Site.name).order_by(Site.name))),
        "machines": list(session.scalars(select(Machine.name).distinct().order_by(Machine.name))),
        "kinds": {k: v for k, v in PUMP_KINDS.items()},
        "statuses": STATUS_LABELS,
        "sorts": list(SORTS),
    }
