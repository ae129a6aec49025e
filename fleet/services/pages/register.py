"""Data of the register pages: the lists of sites, machines, positions, pumps, oils and default limits, and the
data of each form page. Plain dicts, JSON-ready."""

from sqlalchemy import func, select
from sqlalchemy.orm import Session, aliased

from fleet.db.models import Installation, LimitDefault, Machine, Oil, Position, Pump, Site
from fleet.kinds import PUMP_KINDS
from fleet.services.register.forms import FORMS

# Columns of the register's CSV twin: one row per pump.
CSV_COLUMNS = ("pump", "kind", "variable", "site", "machine", "position", "displacement_cc", "rated_speed_rpm",
               "rated_pressure_bar", "max_flow_lpm", "case_drain", "reference_temp_c", "eta_v_limit",
               "drain_limit_pct", "oil_temp_max_c", "oil_temp_min_c", "cleanliness_target", "reading_interval_days",
               "planning_horizon_weeks", "overhaul_cost")
FORM_COLUMNS = ("name", "label", "value", "unit", "required", "errors")


def register_overview(session: Session) -> dict:
    return {
        "sites": _sites(session),
        "machines": _machines(session),
        "positions": _positions(session),
        "pumps": _pumps(session),
        "oils": _oils(session),
        "limits": _limits(session),
        "kinds": dict(PUMP_KINDS),
    }


def _sites(session: Session) -> list[dict]:
    machines = dict(session.execute(select(Machine.site_id, func.count()).group_by(Machine.site_id)).all())
    return [{"id": s.id, "site": s.name, "currency": s.currency, "tariff_per_kwh": s.tariff_per_kwh,
             "motor_efficiency": s.motor_efficiency, "machines": machines.get(s.id, 0), "note": s.note}
            for s in session.scalars(select(Site).order_by(Site.name))]


def _machines(session: Session) -> list[dict]:
    rows = session.execute(select(Machine, Site.name, Oil.name).join(Site, Site.id == Machine.site_id)
                           .outerjoin(Oil, Oil.id == Machine.oil_id).order_by(Site.name, Machine.name))
    return [{"id": m.id, "site": site, "machine": m.name, "oil": oil, "note": m.note} for m, site, oil in rows]


def _positions(session: Session) -> list[dict]:
    current = aliased(Installation)
    rows = session.execute(
        select(Position.id, Site.name, Machine.name, Position.name, Pump.serial)
        .join(Machine, Machine.id == Position.machine_id).join(Site, Site.id == Machine.site_id)
        .outerjoin(current, (current.position_id == Position.id) & current.removed_at.is_(None))
        .outerjoin(Pump, Pump.id == current.pump_id)
        .order_by(Site.name, Machine.name, Position.name)
    )
    return [{"id": i, "site": s, "machine": m, "position": p, "pump": serial} for i, s, m, p, serial in rows]


def _pumps(session: Session) -> list[dict]:
    current = aliased(Installation)
    rows = session.execute(
        select(Pump, Site.name, Machine.name, Position.name, Site.currency)
        .outerjoin(current, (current.pump_id == Pump.id) & current.removed_at.is_(None))
        .outerjoin(Position, Position.id == current.position_id)
        .outerjoin(Machine, Machine.id == Position.machine_id)
        .outerjoin(Site, Site.id == Machine.site_id)
        .order_by(Pump.serial)
    )
    out = []
    for pump, site, machine, position, currency in rows:
        out.append({
            "pump": pump.serial, "kind": pump.kind, "kind_label": PUMP_KINDS.get(pump.kind, pump.kind),
            "variable": pump.variable, "site": site, "machine": machine, "position": position, "currency": currency,
            **{name: getattr(pump, name) for name in CSV_COLUMNS[6:]},
        })
    return out


def _oils(session: Session) -> list[dict]:
    used = dict(session.execute(select(Machine.oil_id, func.count()).group_by(Machine.oil_id)).all())
    return [{"id": o.id, "oil": o.name, "iso_vg": o.iso_vg, "viscosity_40": o.viscosity_40,
             "viscosity_100": o.viscosity_100, "density_15": o.density_15, "machines": used.get(o.id, 0)}
            for o in session.scalars(select(Oil).order_by(Oil.name))]


def _limits(session: Session) -> list[dict]:
    return [{"kind": row.kind, "kind_label": PUMP_KINDS.get(row.kind, row.kind), "eta_v_limit": row.eta_v_limit,
             "drain_limit_pct": row.drain_limit_pct, "oil_temp_max_c": row.oil_temp_max_c,
             "oil_temp_min_c": row.oil_temp_min_c, "cleanliness_target": row.cleanliness_target,
             "reading_interval_days": row.reading_interval_days, "planning_horizon_weeks": row.planning_horizon_weeks,
             "source": row.source}
            for row in session.scalars(select(LimitDefault).order_by(LimitDefault.kind))]


def form_page(session: Session, form: str, key: str | None, values: dict | None = None,
              errors: dict | None = None, saved: str | None = None) -> dict:
    """A form's fields with their values (typed, else stored, else defaults) and problems."""
    spec = FORMS[form]
    shown = spec.initial(session, key) if values is None else values
    errors = errors or {}
    fields = [f.as_dict(shown, errors) for f in spec.fields(session, key)]
    return {
        "form": form,
        "title": spec.title,
        "key": key,
        "editing": key is not None,
        "fields": fields,
        "problems": [f"{name}: {reason}" if name else reason for name, reasons in errors.items()
                     for reason in reasons],
        "saved": saved,
    }
