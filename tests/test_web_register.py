"""Register and records pages: lists, add/edit forms, records, CSV upload; JSON and CSV twins."""

import csv
import io

import pytest
from click.testing import CliRunner
from sqlalchemy import func, select

from fleet.cli import main as cli
from fleet.db.models import (
    AnalysisResult,
    Installation,
    LimitDefault,
    Machine,
    MaintenanceEvent,
    Oil,
    OilSample,
    Position,
    Pump,
    Reading,
    Site,
    StatusChange,
)
from fleet.services.pages.register import CSV_COLUMNS, FORM_COLUMNS


def _rows(response) -> list[dict]:
    return list(csv.DictReader(io.StringIO(response.get_data(as_text=True))))


def _count(db, model) -> int:
    with db.sessions() as s:
        return s.scalar(select(func.count()).select_from(model))


def test_index_lists_the_register_and_its_twins(client, demo_db):
    page = client.get("/register")
    assert page.status_code == 200
    html = page.get_data(as_text=True)
    for text in ("East Yard", "River Shop", "EY-101", "Default limits per pump kind", "Record a lab result"):
        assert text in html
    assert 'href="/register.json"' in html and 'href="/register.csv"' in html

    data = client.get("/register.json").get_json()
    assert set(data) == {"sites", "machines", "positions", "pumps", "oils", "limits", "kinds"}
    assert set(data["pumps"][0]) == {"pump", "kind", "kind_label", "variable", "site", "machine", "position",
                                     "currency",
                                     *CSV_COLUMNS[6:]}
    assert set(data["sites"][0]) == {"id", "site", "currency", "tariff_per_kwh", "motor_efficiency", "machines",
                                     "note"}
    assert len(data["pumps"]) == _count(demo_db, Pump) == 41
    assert client.get("/register", headers={"Accept": "application/json"}).get_json() == data

    twin = client.get("/register.csv")
    assert twin.mimetype == "text/csv"
    assert twin.get_data(as_text=True).splitlines()[0] == ",".join(CSV_COLUMNS)
    rows = _rows(twin)
    assert [r["pump"] for r in rows] == [p["pump"] for p in data["pumps"]]


def test_new_pump_in_foreign_units_is_stored_canonical_and_analysed(client, demo_db):
    with demo_db.sessions() as s:
        position = s.scalar(select(Position).where(Position.name == "pump 1"))
        position_id = position.id
    form = {"pump": "NEW-900", "position_id": str(position_id), "kind": "axial_piston", "variable": "yes",
            "case_drain": "yes", "displacement": "1.8", "displacement__unit": "in3/rev", "rated_speed": "1500",
            "rated_speed__unit": "rpm", "rated_pressure": "3000", "rated_pressure__unit": "psi",
            "reference_temp": "122", "reference_temp__unit": "degF", "overhaul_cost": "4000",
            "installed_at": "2026-01-05T08:00", "installed_hours": "0"}
    response = client.post("/register/pump/new", data=form)
    assert response.status_code == 302
    with demo_db.sessions() as s:
        pump = s.scalar(select(Pump).where(Pump.serial == "NEW-900"))
        # 1 in = 2.54 cm exactly (NIST SP 811), so 1.8 in3 = 1.8 * 16.387064 cm3.
        assert pump.displacement_cc == pytest.approx(29.4967, abs=1e-4)
        # 3000 psi = 206.84 bar (NIST SP 811: 1 psi = 0.0689475729 bar).
        assert pump.rated_pressure_bar == pytest.approx(206.84, abs=0.01)
        # 122 degF = (122 - 32) * 5/9 = 50 degC (NIST SP 811 temperature conversion).
        assert pump.reference_temp_c == pytest.approx(50.0, abs=1e-9)
        assert pump.variable and pump.case_drain and pump.overhaul_cost == 4000
        stay = s.scalar(select(Installation).where(Installation.pump_id == pump.id))
        assert stay.position_id == position_id and stay.removed_at is None
        # Saving re-analysed the pump: it has a stored result (too few readings for a trend, so it says so).
        assert s.get(AnalysisResult, pump.id) is not None
    assert "NEW-900" in client.get("/register").get_data(as_text=True)


def test_pump_form_errors_keep_what_was_typed_and_save_nothing(client, demo_db):
    before = _count(demo_db, Pump)
    form = {"pump": "TYPO-1", "position_id": "", "kind": "vane", "displacement": "abc", "rated_speed": "1450",
            "rated_pressure": "-5", "cleanliness_target": "18/16/13"}
    response = client.post("/register/pump/new", data=form)
    assert response.status_code == 400
    html = response.get_data(as_text=True)
    assert "Nothing was saved" in html
    label = next(f["label"] for f in client.get("/register/pump/new.json").get_json()["fields"]
                 if f["name"] == "position_id")
    assert f'<a href="#f-position_id">{label}</a>: a value is required' in html  # named as the form labels it
    assert 'value="TYPO-1"' in html and 'value="1450"' in html and 'value="abc"' in html
    assert _count(demo_db, Pump) == before

    # With a position, the importer's own checks report against the fields.
    with demo_db.sessions() as s:
        position_id = s.scalar(select(Position.id).limit(1))
    response = client.post("/register/pump/new", data={**form, "position_id": str(position_id)})
    assert response.status_code == 400
    html = response.get_data(as_text=True)
    assert "&#39;abc&#39; is not a number" in html
    assert "-5 must be above zero" in html
    assert 'value="abc"' in html and 'value="1450"' in html
    assert _count(demo_db, Pump) == before

    # The same failure as JSON names each field.
    response = client.post("/register/pump/new.json", data={**form, "position_id": str(position_id)})
    assert response.status_code == 400
    fields = {f["name"]: f for f in response.get_json()["fields"]}
    assert fields["displacement"]["value"] == "abc"
    assert fields["displacement"]["errors"] == ["'abc' is not a number"]
    assert fields["rated_pressure"]["errors"] == ["-5 must be above zero"]


def test_edit_pump_sets_and_clears_limit_overrides(client, demo_db):
    page = client.get("/register/pump/EY-101/edit")
    assert page.status_code == 200 and 'value="EY-101"' in page.get_data(as_text=True)
    values = {f["name"]: f["value"] for f in client.get("/register/pump/EY-101/edit.json").get_json()["fields"]}
    values.update(eta_v_limit="0.9", cleanliness_target="17/15/12", note="invented demo note")
    values = {k: v for k, v in values.items() if v not in ("", None)}
    assert client.post("/register/pump/EY-101/edit", data=values).status_code == 302
    with demo_db.sessions() as s:
        pump = s.scalar(select(Pump).where(Pump.serial == "EY-101"))
        assert (pump.eta_v_limit, pump.cleanliness_target, pump.note) == (0.9, "17/15/12", "invented demo note")
        assert s.get(AnalysisResult, pump.id).detail["eta_v_limit"] == 0.9
    values.pop("eta_v_limit")
    assert client.post("/register/pump/EY-101/edit", data=values).status_code == 302
    with demo_db.sessions() as s:
        assert s.scalar(select(Pump.eta_v_limit).where(Pump.serial == "EY-101")) is None


def test_site_machine_position_and_oil_forms(client, demo_db):
    assert client.post("/register/site/new", data={"site": "Hill Works (invented)", "currency": "CHF",
                                                   "tariff_per_kwh": "0.21", "motor_efficiency": "0.95"}
                       ).status_code == 302
    assert client.post("/register/oil/new", data={"name": "Invented VG 68", "iso_vg": "68", "viscosity_40": "68",
                                                  "viscosity_100": "8.8", "density_15": "0.875"}).status_code == 302
    with demo_db.sessions() as s:
        site = s.scalar(select(Site).where(Site.name == "Hill Works (invented)"))
        oil = s.scalar(select(Oil).where(Oil.name == "Invented VG 68"))
        assert (site.currency, site.tariff_per_kwh, site.motor_efficiency) == ("CHF", 0.21, 0.95)
        assert (oil.iso_vg, oil.viscosity_40, oil.viscosity_100, oil.density_15) == (68, 68.0, 8.8, 0.875)
        site_id, oil_id = site.id, oil.id
    assert client.post("/register/machine/new", data={"site_id": str(site_id), "name": "press-9",
                                                      "oil_id": str(oil_id)}).status_code == 302
    with demo_db.sessions() as s:
        machine_id = s.scalar(select(Machine.id).where(Machine.name == "press-9"))
    assert client.post("/register/position/new", data={"machine_id": str(machine_id), "name": "main"}
                       ).status_code == 302
    # A second machine of the same name on the same site is refused, and the typed note stays.
    response = client.post("/register/machine/new", data={"site_id": str(site_id), "name": "press-9",
                                                          "note": "typed note"})
    assert response.status_code == 400
    assert "the site already has a machine" in response.get_data(as_text=True)
    assert "typed note" in response.get_data(as_text=True)
    # Editing the site keeps its name and changes the tariff.
    assert client.post(f"/register/site/{site_id}/edit", data={"site": "ignored", "currency": "CHF",
                                                               "tariff_per_kwh": "0.30", "motor_efficiency": "0.95"}
                       ).status_code == 302
    with demo_db.sessions() as s:
        site = s.get(Site, site_id)
        assert (site.name, site.tariff_per_kwh) == ("Hill Works (invented)", 0.30)
        assert s.scalar(select(Position.name).where(Position.machine_id == machine_id)) == "main"


def test_oil_form_refuses_a_thicker_hot_oil(client, demo_db):
    response = client.post("/register/oil/new", data={"name": "Backwards", "viscosity_40": "10",
                                                      "viscosity_100": "46"})
    assert response.status_code == 400
    assert "must be below viscosity_40 (oil thins as it warms)" in response.get_data(as_text=True)
    assert 'value="Backwards"' in response.get_data(as_text=True)
    with demo_db.sessions() as s:
        assert s.scalar(select(Oil).where(Oil.name == "Backwards")) is None


def test_default_limits_edit_reanalyses_the_fleet(client, demo_db):
    values = {f["name"]: f["value"] for f in
              client.get("/register/limits/axial_piston/edit.json").get_json()["fields"]}
    assert values["eta_v_limit"] == "0.85"
    changes_before = _count(demo_db, StatusChange)
    values["eta_v_limit"] = "0.97"  # above every demo piston pump's efficiency: all cross it
    assert client.post("/register/limits/axial_piston/edit", data=values).status_code == 302
    with demo_db.sessions() as s:
        assert s.get(LimitDefault, "axial_piston").eta_v_limit == 0.97
        statuses = s.scalars(select(AnalysisResult.status).join(Pump, Pump.id == AnalysisResult.pump_id)
                             .where(Pump.kind == "axial_piston", Pump.eta_v_limit.is_(None))).all()
        assert statuses and set(statuses) == {"past_limit"}
    assert _count(demo_db, StatusChange) > changes_before

    bad = {**values, "oil_temp_min": "90", "oil_temp_max": "80", "cleanliness_target": "12/16/18"}
    response = client.post("/register/limits/axial_piston/edit", data=bad)
    assert response.status_code == 400
    html = response.get_data(as_text=True)
    assert "must be below oil_temp_max" in html and 'value="12/16/18"' in html


def test_records_installation_removal_event_and_sample(client, demo_db):
    with demo_db.sessions() as s:
        pump = s.scalar(select(Pump).where(Pump.serial == "EY-101"))
        stay = s.scalar(select(Installation).where(Installation.pump_id == pump.id,
                                                   Installation.removed_at.is_(None)))
        last = s.scalar(select(func.max(Reading.taken_at)).where(Reading.pump_id == pump.id))
        machine = s.scalar(select(Machine).where(Machine.name == "power-unit-1"))
        machine_id, pump_id = machine.id, pump.id
    moment = last.strftime("%Y-%m-%dT%H:%M")

    page = client.get("/register/event/new")
    assert "Before you work on a pump" in page.get_data(as_text=True)
    assert client.post("/register/event/new", data={"pump": "EY-101", "date": moment, "kind": "inspection",
                                                    "cost": "120", "note": "invented: no leaks found"}
                       ).status_code == 302
    assert client.post("/register/sample/new", data={"machine_id": str(machine_id), "sampled_at": moment,
                                                     "iso4406": "18/16/13", "water": "150"}).status_code == 302
    # A lab result needs a known code: a typo is named and the typed code stays in the form.
    response = client.post("/register/sample/new", data={"machine_id": str(machine_id), "sampled_at": moment,
                                                         "iso4406": "18/16/x"})
    assert response.status_code == 400 and 'value="18/16/x"' in response.get_data(as_text=True)

    assert client.post("/register/removal/new", data={"pump": "EY-101", "removed_at": moment,
                                                      "hours": "1"}).status_code == 400  # hour meter went back
    assert client.post("/register/removal/new", data={"pump": "EY-101", "removed_at": moment}).status_code == 302
    with demo_db.sessions() as s:
        event = s.scalar(select(MaintenanceEvent).where(MaintenanceEvent.pump_id == pump_id,
                                                        MaintenanceEvent.kind == "inspection"))
        assert (event.cost, event.note) == (120.0, "invented: no leaks found")
        sample = s.scalar(select(OilSample).where(OilSample.machine_id == machine_id,
                                                  OilSample.sampled_at == last.replace(second=0, microsecond=0)))
        assert (sample.code_4, sample.code_6, sample.code_14, sample.water_ppm) == (18, 16, 13, 150.0)
        assert s.get(Installation, stay.id).removed_at == last.replace(second=0, microsecond=0)

    # Put it back where it was.
    assert client.post("/register/installation/new", data={"pump": "EY-101", "position_id": str(stay.position_id),
                                                           "installed_at": moment}).status_code == 302
    with demo_db.sessions() as s:
        open_stays = s.scalars(select(Installation).where(Installation.pump_id == pump_id,
                                                          Installation.removed_at.is_(None))).all()
        assert [row.position_id for row in open_stays] == [stay.position_id]


def test_unknown_forms_and_records_are_404(client):
    assert client.get("/register/widget/new").status_code == 404
    assert client.get("/register/limits/new").status_code == 404
    assert client.get("/register/event/1/edit").status_code == 404
    assert client.get("/register/pump/NO-SUCH/edit").status_code == 404
    assert client.get("/register/limits/warp_drive/edit").status_code == 404


def test_form_twins_have_exact_keys(client):
    data = client.get("/register/site/new.json").get_json()
    assert set(data) == {"form", "title", "key", "editing", "fields", "problems", "saved"}
    assert set(data["fields"][0]) == {"name", "label", "type", "required", "help", "options", "readonly", "units",
                                      "unit", "value", "errors"}
    twin = client.get("/register/oil/new.csv")
    assert twin.get_data(as_text=True).splitlines()[0] == ",".join(FORM_COLUMNS)
    assert [r["name"] for r in _rows(twin)] == ["name", "iso_vg", "viscosity_40", "viscosity_100", "density_15"]


BAD_READINGS = (
    "pump,taken_at,hours,outlet_pressure [psi],speed,outlet_flow [gal/min],oil_temp\n"
    "EY-101,2026-01-03 09:00,100,3000,1500,10,50\n"
    "NOPE-1,2026-01-03 09:00,100,3000,1500,10,50\n"
    "EY-102,yesterday,100,3000,1500,ten,50\n"
)


def test_upload_with_problems_shows_the_cli_report_and_writes_nothing(client, demo_db, tmp_path, monkeypatch):
    before = _count(demo_db, Reading)
    response = client.post("/register/upload", data={"kind": "readings",
                                                     "file": (io.BytesIO(BAD_READINGS.encode()), "bad.csv")},
                           content_type="multipart/form-data")
    assert response.status_code == 400
    assert _count(demo_db, Reading) == before
    html = response.get_data(as_text=True)
    assert "nothing was imported" in html

    # The CLI on the same file prints the same row-numbered report.
    path = tmp_path / "bad.csv"
    path.write_text(BAD_READINGS)
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    result = CliRunner().invoke(cli, ["import", "readings", str(path)])
    assert result.exit_code == 1
    cli_report = [line for line in result.output.splitlines() if line.startswith("row ")]
    assert len(cli_report) == 3
    twin = client.post("/register/upload.json", data={"kind": "readings",
                                                      "file": (io.BytesIO(BAD_READINGS.encode()), "bad.csv")},
                       content_type="multipart/form-data")
    assert twin.status_code == 400
    body = twin.get_json()
    assert body["outcome"]["report"].splitlines() == cli_report
    assert [p["row"] for p in body["problems"]] == [3, 4, 4]
    assert set(body["problems"][0]) == {"row", "column", "reason", "cell"}  # cell: only a spreadsheet has one
    assert body["problems"][0]["cell"] is None
    for line in cli_report:
        assert line.replace("'", "&#39;") in html


def test_upload_of_a_good_file_imports_and_reanalyses(client, demo_db):
    with demo_db.sessions() as s:
        pump = s.scalar(select(Pump).where(Pump.serial == "EY-101"))
        last = s.scalar(select(func.max(Reading.taken_at)).where(Reading.pump_id == pump.id))
        hours = s.scalar(select(func.max(Reading.hours)).where(Reading.pump_id == pump.id))
        computed_before = s.get(AnalysisResult, pump.id).computed_at
    when = last.replace(second=0, microsecond=0).strftime("%Y-%m-%d %H:%M")
    text = ("pump,taken_at,hours,outlet_pressure,speed,outlet_flow,case_drain_flow,oil_temp\n"
            f"EY-101,{when}:30,{hours + 1},240,1500,62,2.1,48\n")
    response = client.post("/register/upload", data={"kind": "readings",
                                                     "file": (io.BytesIO(text.encode()), "good.csv")},
                           content_type="multipart/form-data")
    assert response.status_code == 200
    assert "readings: 1 row(s): 1 new, 0 updated" in response.get_data(as_text=True)
    with demo_db.sessions() as s:
        assert s.get(AnalysisResult, pump.id).computed_at > computed_before
    assert client.post("/register/upload", data={"kind": "readings"},
                       content_type="multipart/form-data").status_code == 400


@pytest.mark.parametrize("role", ["viewer", "technician", "engineer"])
def test_the_register_offers_each_role_only_what_it_may_open(web_app, role):
    """Every link of the register page opens for the role that sees it: no 'Not allowed' behind a button. A
    viewer or technician reads the register; the engineer records and edits (fleet.web.register._role_for)."""
    import re

    from tests.conftest import sign_in

    with web_app.test_client() as browser:
        sign_in(browser, role)
        html = browser.get("/register").get_data(as_text=True)
        links = sorted(set(re.findall(r'href="(/register/[^"#?]+)"', html)))
        refused = [link for link in links if browser.get(link).status_code != 200]
    assert refused == []
    sample = "/register/sample/new" in links
    edits = {link for link in links if link.endswith("/edit") or link.endswith("/new") or link == "/register/upload"}
    if role == "engineer":
        assert sample and "/register/pump/new" in edits and "/register/upload" in edits and len(edits) > 50
    else:
        assert sample == (role == "technician") and edits <= {"/register/sample/new"}
        assert 'id="register-read-only"' in html and "an engineer's" in html


def test_a_refused_form_names_each_field_as_the_form_labels_it(client):
    """'Nothing was saved' listed 'iso4406: ...' and 'water: ...', the program's names; it now names each field by
    the label it has on the form, with a link to it, and every problem still appears."""
    import re

    labels = {f["name"]: f["label"] for f in client.get("/register/sample/new.json").get_json()["fields"]}
    response = client.post("/register/sample/new", data={"machine_id": "1", "sampled_at": "2026-01-05T10:00",
                                                          "iso4406": "18/16", "water": "-5"})
    assert response.status_code == 400
    html = response.get_data(as_text=True)
    summary = html[html.index('id="problems"'):html.index("</div>", html.index('id="problems"'))]
    listed = re.findall(r'<li><a href="#f-(\w+)">([^<]+)</a>: ', summary)
    assert {"iso4406", "water"} <= {name for name, _ in listed}
    assert all(label == labels[name] for name, label in listed)
    assert "<li>iso4406:" not in summary and "<li>water:" not in summary
    assert summary.count("<li>") == len(client.post("/register/sample/new.json", data={
        "machine_id": "1", "sampled_at": "2026-01-05T10:00", "iso4406": "18/16", "water": "-5"}).get_json()["problems"])
