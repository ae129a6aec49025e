"""The three jobs at a terminal: `fleet round`, `fleet review`, `fleet plan`, on the invented demo plant."""

import json

from click.testing import CliRunner
from sqlalchemy import func, select

from fleet.cli import main
from fleet.db.models import Pump, Reading
from fleet.safety import CAUTIONS
from fleet.services.rounds import fields_for

ROUTE = "tilt-table"  # a machine of the demo plant: its pumps form a suggested route


def _run(demo_db, *args, input=None):
    return CliRunner().invoke(main, ["--database", demo_db.url, *args], input=input)


def _route(demo_db):
    from fleet.services.rounds import route_list

    with demo_db.sessions() as session:
        route = next(r for r in route_list(session)["suggested"] if r["name"].endswith(ROUTE))
        pumps = {serial: session.scalar(select(Pump).where(Pump.serial == serial)) for serial in route["pumps"]}
        hours = {serial: session.scalar(select(func.max(Reading.hours)).where(Reading.pump_id == pump.id))
                 for serial, pump in pumps.items()}
    return route["pumps"], pumps, hours


def _answers(pump, last_hours, **override) -> list[str]:
    values = {"hours": f"{last_hours + 12:.0f}", "outlet_pressure": f"{0.8 * pump.rated_pressure_bar:.0f}",
              "speed": f"{pump.rated_speed_rpm:.0f}",
              "outlet_flow": f"{0.9 * pump.displacement_cc * pump.rated_speed_rpm / 1000:.1f}",
              "case_drain_flow": "", "oil_temp": "50", "stroke": "", **override}
    return [values[f.name] for f in fields_for(pump)]


def _count(demo_db, serial):
    with demo_db.sessions() as session:
        return session.scalar(select(func.count()).select_from(Reading).join(Pump).where(Pump.serial == serial))


def test_a_round_at_the_terminal_saves_each_confirmed_pump(demo_db):
    serials, pumps, hours = _route(demo_db)
    first, *others = serials
    lines = _answers(pumps[first], hours[first]) + ["skip"] * len(others)
    before = _count(demo_db, first)
    result = _run(demo_db, "round", ROUTE, "--who", "invented tech", input="\n".join(lines) + "\n")
    assert result.exit_code == 0, result.output
    assert all(line in result.output for line in CAUTIONS)  # the cautions come before the work
    assert "saved; analysis refreshed for the 1 pump(s)" in result.output and "Round complete." in result.output
    assert _count(demo_db, first) == before + 1
    with demo_db.sessions() as session:
        stored = session.scalars(select(Reading).join(Pump).where(Pump.serial == first)
                                 .order_by(Reading.id.desc())).first()
    assert (stored.source, stored.taken_by, stored.temp_c) == ("form", "invented tech", 50.0)


def test_units_doubts_and_errors_at_the_terminal(demo_db):
    serials, pumps, hours = _route(demo_db)
    first, *others = serials
    pump = pumps[first]
    # Pressure read in psi; the oil is hot (a doubt to confirm); the first try has a negative speed (an error).
    bad = _answers(pump, hours[first], speed="-5", oil_temp="95",
                   outlet_pressure=f"{0.8 * pump.rated_pressure_bar / 0.0689475729:.0f}")
    fixed = [""] * len(bad)  # Enter keeps each typed value ...
    fixed[[f.name for f in fields_for(pump)].index("speed")] = f"{pump.rated_speed_rpm:.0f}"  # ... but the speed
    lines = bad + fixed + ["y"] + ["skip"] * len(others)
    result = _run(demo_db, "round", ROUTE, "--unit", "outlet_pressure=psi", input="\n".join(lines) + "\n")
    assert result.exit_code == 0, result.output
    # Named by the prompt it was typed at (the form's label), not the program's name of the field.
    label = next(f.label for f in fields_for(pump) if f.name == "speed")
    assert f"problem: {label}: -5 is below the lowest allowed value (10 rpm)" in result.output
    assert f"  {label} [rpm]" in result.output and "problem: speed" not in result.output
    assert "check: Oil temperature 95.0 °C is outside" in result.output
    with demo_db.sessions() as session:
        stored = session.scalars(select(Reading).join(Pump).where(Pump.serial == first)
                                 .order_by(Reading.id.desc())).first()
    # psi converted to bar with 1 psi = 0.0689475729 bar (NIST SP 811), within the rounding of the typed psi.
    assert abs(stored.pressure_bar - 0.8 * pump.rated_pressure_bar) < 0.04
    assert stored.temp_c == 95.0


def test_unknown_route_names_the_choices(demo_db):
    result = _run(demo_db, "round", "nowhere")
    assert result.exit_code != 0 and "no route or machine 'nowhere'" in result.output and ROUTE in result.output


def test_review_at_the_terminal_and_as_json(demo_db):
    text = _run(demo_db, "review")
    assert text.exit_code == 0, text.output
    for heading in ("Weekly review", "Limits crossed", "Still past their limit", "Status changes", "New reasons",
                    "Maintenance done", "Pumps installed or removed", "Readings corrected", "Rounds missed",
                    "Lab results late", "Largest energy losses"):
        assert heading in text.output
    data = json.loads(_run(demo_db, "review", "--json").output)
    assert set(data["counts"]) == {"status_change", "new_reason", "limit_crossed", "still_past_limit",
                                   "maintenance", "installation", "reading_corrected", "round_missed", "lab_late",
                                   "energy_loss"}
    for late in data["lab_late"]:  # the sentence and the table state the same whole days
        assert f"waiting {late['days_waiting']} days" in text.output
        assert f"has waited {late['days_waiting']} days" in late["sentence"]
    assert f"Status changes ({data['counts']['status_change']})" in text.output


def test_plan_at_the_terminal_and_as_json(demo_db):
    text = _run(demo_db, "plan", "--weeks", "12")
    assert text.exit_code == 0, text.output
    assert "Overhaul plan: the next 12 weeks" in text.output and CAUTIONS[0] in text.output
    data = json.loads(_run(demo_db, "plan", "--weeks", "12", "--json").output)
    assert data["weeks"] == 12
    for row in data["pumps"]:
        assert row["pump"] in text.output
    # The limit in words, as the pages and `fleet analyze` write it, never the JSON's key.
    lines = {line.split()[0]: line for line in text.output.splitlines() if line.startswith("  ") and line.split()}
    words = {"eta_v": "η_v", "case_drain": "case drain"}
    for row in data["pumps"]:
        limit = row.get("crossed_limit") or row.get("governing_limit")
        assert limit in words and words[limit] in lines[row["pump"]] and limit not in lines[row["pump"]]
    assert "invented: winter maintenance stop" in text.output  # the demo's shutdown windows
    fitted = [k for k in data["kinds"] if k["beta"] is not None]
    assert fitted and all(f"hold {k['spares_to_hold']} spare(s)" in text.output for k in fitted)
