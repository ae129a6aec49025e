"""Right after any write, through any door, the stored analysis is what a full `fleet analyze` would store.

Each test writes through one door (a page form, the round at a terminal, the readings API, a CSV import on the
command line or the upload page, a delete, a restore, the register, the default limits), then compares every
stored figure of the service list and the fleet life figures of every pump kind with a full analysis of the same
database at that moment, to 1 part in 10,000. Nothing moves with the clock alone within a test's few seconds
(days since the last reading are whole-day counts in the reasons). The demo plant is invented.
"""

import math
from datetime import timedelta

import pytest
from click.testing import CliRunner
from sqlalchemy import func, select

from fleet.cli import main
from fleet.db.models import FleetPrior, Installation, LimitDefault, MaintenanceEvent, Oil, Pump, Reading
from fleet.services.analysis import analysis_records, refresh_analysis, stale_pumps
from fleet.services.analysis.store import CONTRACT_FIELDS
from fleet.timeutil import utcnow

LOBE = "RS-701"  # an invented lobe pump: its kind has 2 completed service intervals, too few for life figures
TOLERANCE = 1e-4
PRIOR_FIELDS = ("beta", "alpha", "b10_hours", "n_failures", "n_suspensions", "expected_overhauls_in_horizon")
COMPARED = CONTRACT_FIELDS + ("rank", "prior_b10_hours", "past_margin", "limit_date_low", "limit_date_high")


def _same(a, b) -> bool:
    if isinstance(a, float) or isinstance(b, float):
        if a is None or b is None:
            return a is None and b is None
        return math.isclose(a, b, rel_tol=TOLERANCE, abs_tol=1e-9)
    return a == b


def _snapshot(session) -> tuple[dict, dict]:
    records = {r["pump"]: {k: r.get(k) for k in COMPARED} for r in analysis_records(session)}
    priors = {p.kind: {k: p.detail.get(k) for k in PRIOR_FIELDS} for p in session.scalars(select(FleetPrior))}
    return records, priors


def assert_stored_equals_full(demo_db) -> None:
    with demo_db.sessions() as session:
        assert stale_pumps(session) == set(), "a write left analyses stale"
        stored = _snapshot(session)
    with demo_db.sessions() as session, session.begin():
        refresh_analysis(session)  # what a full `fleet analyze` stores now; rolled back below
        full = _snapshot(session)
        session.rollback()
    for what, mine, theirs in (("pump", stored[0], full[0]), ("kind", stored[1], full[1])):
        assert mine.keys() == theirs.keys(), what
        for key in mine:
            wrong = {f: (mine[key][f], theirs[key][f]) for f in mine[key] if not _same(mine[key][f], theirs[key][f])}
            assert not wrong, f"{what} {key}: stored vs full analysis {wrong}"


def _lobe_prior(demo_db) -> dict:
    with demo_db.sessions() as session:
        return session.get(FleetPrior, "lobe").detail


def _last(demo_db, serial) -> tuple[float, object]:
    with demo_db.sessions() as session:
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == serial))
        return session.execute(select(func.max(Reading.hours), func.max(Reading.taken_at))
                               .where(Reading.pump_id == pump_id)).one()


def _overhaul_csv(demo_db, tmp_path, serial=LOBE):
    hours, at = _last(demo_db, serial)
    path = tmp_path / "events.csv"
    path.write_text("pump,date,hours,kind,cost,failure_mode,note\n"
                    f"{serial},{at + timedelta(hours=1):%Y-%m-%d %H:%M},{hours + 2:.0f},overhaul,4200,"
                    "internal_leakage,invented overhaul\n")
    return path


def test_the_demo_plant_as_built_equals_a_full_analysis(demo_db):
    assert_stored_equals_full(demo_db)


def test_an_overhaul_imported_at_the_terminal_refits_its_kind(demo_db, tmp_path):
    assert _lobe_prior(demo_db)["beta"] is None  # 2 completed intervals: no fleet life figures yet
    result = CliRunner().invoke(main, ["--database", demo_db.url, "import", "events",
                                       str(_overhaul_csv(demo_db, tmp_path))])
    assert result.exit_code == 0, result.output
    prior = _lobe_prior(demo_db)
    assert prior["n_failures"] == 3 and prior["beta"] is not None  # the third completed interval counts at once
    with demo_db.sessions() as session:
        lobes = [r for r in analysis_records(session) if r["kind"] == "lobe"]
    # every lobe pump of known age gets the figure (the one just overhauled has no reading since, so no age)
    assert [r["pump"] for r in lobes if r["prior_hours_to_overhaul"] is not None] == \
        [r["pump"] for r in lobes if r["age_hours"] is not None] != []
    assert_stored_equals_full(demo_db)


def test_an_overhaul_uploaded_then_deleted_then_restored(client, demo_db, tmp_path):
    data = {"kind": "events", "file": (_overhaul_csv(demo_db, tmp_path).open("rb"), "events.csv")}
    assert client.post("/register/upload", data=data, content_type="multipart/form-data").status_code == 200
    assert _lobe_prior(demo_db)["n_failures"] == 3
    assert_stored_equals_full(demo_db)
    with demo_db.sessions() as session:
        event_id = session.scalar(select(MaintenanceEvent.id).where(MaintenanceEvent.note == "invented overhaul"))
    assert client.post(f"/pumps/{LOBE}/events/{event_id}/delete").status_code == 302
    assert _lobe_prior(demo_db)["n_failures"] == 2 and _lobe_prior(demo_db)["beta"] is None
    assert_stored_equals_full(demo_db)
    record_id = client.get("/trash.json").get_json()["deleted"][0]["id"]
    assert client.post(f"/trash/{record_id}/restore").status_code == 302
    assert _lobe_prior(demo_db)["n_failures"] == 3
    assert_stored_equals_full(demo_db)


def test_a_reading_posted_to_the_api(client, demo_db):
    hours, _ = _last(demo_db, "EY-104")
    body = {"pump": "EY-104", "taken_at": (utcnow() - timedelta(minutes=5)).isoformat(timespec="minutes"),
            "hours": hours + 8, "outlet_pressure": 150, "speed": 1450, "outlet_flow": 40.0, "oil_temp": 50}
    assert client.post("/api/readings", json=body).status_code == 201
    assert_stored_equals_full(demo_db)


def test_a_reading_saved_on_the_round_form(client, demo_db):
    response = client.post("/rounds", data={"name": "invariant walk", "pumps": LOBE})
    location = response.headers["Location"]
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == LOBE))
    hours, _ = _last(demo_db, LOBE)
    form = {"taken_at": (utcnow() - timedelta(minutes=5)).strftime("%Y-%m-%dT%H:%M"), "hours": f"{hours + 12:.1f}",
            "outlet_pressure": f"{0.8 * pump.rated_pressure_bar:.1f}", "speed": f"{pump.rated_speed_rpm:.0f}",
            "outlet_flow": f"{0.85 * pump.displacement_cc * pump.rated_speed_rpm / 1000:.2f}", "oil_temp": "50",
            "action": "confirm", "confirmed": "pressure_above_rated,flow_above_theoretical,temperature_outside_limits"}
    assert client.post(f"{location}/stops/1", data=form).status_code == 302
    assert _last(demo_db, LOBE)[0] == pytest.approx(hours + 12, abs=0.05)
    assert_stored_equals_full(demo_db)


def test_a_round_at_the_terminal(demo_db):
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == LOBE))
        route = pump.installations[-1].position.machine.name
    hours, _ = _last(demo_db, LOBE)
    answers = {"hours": f"{hours + 12:.0f}", "outlet_pressure": f"{0.8 * pump.rated_pressure_bar:.0f}",
               "speed": f"{pump.rated_speed_rpm:.0f}",
               "outlet_flow": f"{0.85 * pump.displacement_cc * pump.rated_speed_rpm / 1000:.1f}",
               "case_drain_flow": "", "oil_temp": "50", "stroke": ""}
    from fleet.services.rounds import fields_for, route_list

    with demo_db.sessions() as session:
        serials = next(r for r in route_list(session)["suggested"] if r["name"].endswith(route))["pumps"]
        pumps = {s: session.scalar(select(Pump).where(Pump.serial == s)) for s in serials}
    lines = []
    for serial in serials:
        lines += [answers[f.name] for f in fields_for(pumps[serial])] if serial == LOBE else ["skip"]
    result = CliRunner().invoke(main, ["--database", demo_db.url, "round", route], input="\n".join(lines) + "\ny\n")
    assert result.exit_code == 0 and "saved; analysis refreshed" in result.output, result.output
    assert_stored_equals_full(demo_db)


def test_a_pump_that_changes_kind_refits_both_kinds(client, demo_db):
    with demo_db.sessions() as session:
        before = session.get(FleetPrior, "external_gear").detail["n_suspensions"] + \
            session.get(FleetPrior, "external_gear").detail["n_failures"]
        serial = session.scalar(select(Pump.serial).where(Pump.kind == "external_gear").order_by(Pump.serial))
    values = client.get(f"/register/pump/{serial}/edit.json").get_json()
    form = {f["name"]: f["value"] for f in values["fields"]} | {"kind": "lobe"}
    form = {k: v for k, v in form.items() if v not in (None, "")}
    assert client.post(f"/register/pump/{serial}/edit", data=form).status_code == 302
    with demo_db.sessions() as session:
        after = session.get(FleetPrior, "external_gear").detail
    assert after["n_suspensions"] + after["n_failures"] < before
    assert_stored_equals_full(demo_db)


def test_an_oil_data_sheet_edit_reanalyses_every_pump_that_ran_on_it(client, demo_db):
    with demo_db.sessions() as session:
        oil = session.scalars(select(Oil).order_by(Oil.id)).first()
    form = {"name": oil.name, "viscosity_40": f"{oil.viscosity_40 * 1.1:g}", "viscosity_100": f"{oil.viscosity_100:g}"}
    assert client.post(f"/register/oil/{oil.id}/edit", data=form).status_code == 302
    assert_stored_equals_full(demo_db)


def test_default_limits_of_a_kind(client, demo_db):
    with demo_db.sessions() as session:
        row = session.get(LimitDefault, "axial_piston")
    form = {"eta_v_limit": "0.90", "drain_limit_pct": "4", "oil_temp_max": f"{row.oil_temp_max_c:g}",
            "oil_temp_min": f"{row.oil_temp_min_c:g}", "cleanliness_target": row.cleanliness_target,
            "reading_interval_days": str(row.reading_interval_days),
            "planning_horizon_weeks": str(row.planning_horizon_weeks), "source": "invented stricter site rule"}
    assert client.post("/register/limits/axial_piston/edit", data=form).status_code == 302
    assert_stored_equals_full(demo_db)


def test_a_removal_and_a_lab_result(client, demo_db):
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == "EY-101"))
        stay = session.scalar(select(Installation).where(Installation.pump_id == pump.id,
                                                         Installation.removed_at.is_(None)))
        machine_id = stay.position.machine_id
    _, at = _last(demo_db, "EY-101")
    moment = at.strftime("%Y-%m-%dT%H:%M")
    assert client.post("/register/sample/new", data={"machine_id": str(machine_id), "sampled_at": moment,
                                                     "reported_at": moment, "iso4406": "21/19/16",
                                                     "water": "900"}).status_code == 302
    assert_stored_equals_full(demo_db)
    assert client.post("/register/removal/new", data={"pump": "EY-101", "removed_at": moment}).status_code == 302
    assert_stored_equals_full(demo_db)


def test_an_import_left_for_later_is_brought_up_to_date_by_the_next_read(client, demo_db, tmp_path):
    result = CliRunner().invoke(main, ["--database", demo_db.url, "import", "--no-analysis", "events",
                                       str(_overhaul_csv(demo_db, tmp_path))])
    assert result.exit_code == 0 and "marked stale" in result.output, result.output
    with demo_db.sessions() as session:
        assert stale_pumps(session)  # known stale, never silently
    assert client.get("/").status_code == 200  # a page read brings it up to date first
    assert _lobe_prior(demo_db)["n_failures"] == 3
    assert_stored_equals_full(demo_db)


def test_a_lab_result_changes_no_service_life_so_no_kind_is_refitted(client, demo_db, monkeypatch):
    from fleet.services.analysis import store

    refitted = []
    original = store.refit_kinds
    monkeypatch.setattr(store, "refit_kinds", lambda session, kinds, *rest: (refitted.append(set(kinds)),
                                                                             original(session, kinds, *rest)))
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == "EY-101"))
        machine_id = session.scalar(select(Installation).where(
            Installation.pump_id == pump.id, Installation.removed_at.is_(None))).position.machine_id
    _, at = _last(demo_db, "EY-101")
    moment = at.strftime("%Y-%m-%dT%H:%M")
    assert client.post("/register/sample/new", data={"machine_id": str(machine_id), "sampled_at": moment,
                                                     "reported_at": moment, "iso4406": "20/18/15",
                                                     "water": "400"}).status_code == 302
    assert refitted and all(kinds == set() for kinds in refitted), refitted
    assert_stored_equals_full(demo_db)


def test_prior_figures_read_are_those_the_engine_computed(demo_db):
    """Each pump's prior figures as pages read them (fleet.services.analysis.read_figures.prior_values, from its
    kind's stored fit and its stored age) are those fleet.trend.engine.prior_figures gave it in the full analysis
    that stored them. The figures themselves are checked against scipy in tests/test_trend_weibull.py."""
    from fleet.services.analysis.compute import compute
    from fleet.services.analysis.store import store

    with demo_db.sessions() as session, session.begin():
        computed = compute(session)
        store(session, computed)
        read = {r["pump"]: r for r in analysis_records(session)}
        session.rollback()
    engine_figures = computed.results.set_index("pump")[["prior_hours_to_overhaul", "prior_b10_hours"]]
    assert engine_figures["prior_hours_to_overhaul"].notna().sum() > 10  # the demo's kinds with a fleet fit
    for serial, (hours, b10) in engine_figures.iterrows():
        for field, value in (("prior_hours_to_overhaul", hours), ("prior_b10_hours", b10)):
            expected = None if value != value else float(value)
            assert _same(read[serial][field], expected), (serial, field, read[serial][field], expected)
