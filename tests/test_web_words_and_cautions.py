"""Pages write each quantity one way (η_v as 78.0 %, costs with the site's currency) and show the cautions
wherever they lead to work on a pump: the lab-result form, a pump that must be checked now, hot oil on the round,
readings on running pumps (page and terminal)."""

import re

from click.testing import CliRunner
from markupsafe import escape

from fleet.cli import main
from fleet.safety import (
    CAUTION_TITLE,
    CAUTIONS,
    CHECK_NOW_CAUTION,
    HOT_OIL_CAUTION,
    OVER_PRESSURE_CAUTION,
    RUNNING_CAUTIONS,
    RUNNING_REMINDER,
    SAMPLING_CAUTIONS,
    calls_for_work,
)
from fleet.web.filters import efficiency, money
from tests.test_web_rounds import FIRST, _make_route, _plausible_form


def _html(client, path: str) -> str:
    response = client.get(path)
    assert response.status_code == 200, path
    return response.get_data(as_text=True)


def _has(html: str, text: str) -> bool:
    return str(escape(text)) in html


def _listed(client) -> list[dict]:
    return client.get("/index.json?page_size=500").get_json()["pumps"]


def test_efficiency_and_money_filters():
    assert efficiency(0.78) == "78.0 %" and efficiency(0.8) == "80.0 %" and efficiency(None) == "–"
    assert money(12400.0, "EUR") == "12,400 EUR" and money(12400.0, None) == "12,400" and money(None, "EUR") == "–"


def test_the_service_list_writes_eta_v_as_a_percentage_in_table_and_cards(client):
    html = _html(client, "/")
    rows = _listed(client)
    table = html[html.index('<table class="servicelist">'):html.index("</table>")]
    table_rows = dict(re.findall(r'<tr class="row-[^"]*">.*?<a href="/pumps/([^"]+)">.*?(<td class="num">.*?)</tr>',
                                 table, re.S))
    cards = dict(re.findall(r'<li class="pump-card[^"]*">.*?class="card-pump" href="/pumps/([^"]+)"(.*?)</details>',
                            html, re.S))
    assert len(cards) == len(table_rows) == len(rows) == 41
    for row in rows:
        card = cards[row["pump"]]
        # Each figure of a card sits under its label, with its unit.
        assert "<dt>η<sub>v,ref</sub></dt>" in card and "<dt>Time to limit</dt>" in card
        assert "<dt>Case drain</dt>" in card and "<summary>" in card
        if row["eta_v_ref"] is not None:
            shown = efficiency(row["eta_v_ref"])
            assert f"<dd>{shown}</dd>" in card and f'<td class="num">{shown}</td>' in table_rows[row["pump"]]
            assert f"{row['eta_v_ref']:.3f}<" not in card + table_rows[row["pump"]]  # never the bare fraction
        if row["drain_pct_ref"] is not None:
            assert f"<dd>{row['drain_pct_ref']:.1f} % of max flow</dd>" in card


def test_the_pump_page_review_and_plan_write_eta_v_and_costs_one_way(client):
    data = client.get("/pumps/EY-101.json").get_json()
    html = _html(client, "/pumps/EY-101")
    currency = data["headline"]["currency"]
    assert currency and data["where"]["currency"] == currency
    assert f'<span class="figure-value">{efficiency(data["headline"]["eta_v_ref"])}</span>' in html
    assert f"limit {efficiency(data['limits']['eta_v_limit'])}" in html
    assert f"<dd>{money(data['pump']['overhaul_cost'], currency)}</dd>" in html
    newest = data["readings"][-1]
    assert f'<td class="num">{efficiency(newest["eta_v_ref"])}</td>' in html

    review = client.get("/review.json").get_json()
    html = _html(client, "/review")
    for change in review["status_changes"]:
        assert f'data-label="ηv,ref">{efficiency(change["eta_v_ref"])}</td>' in html
    for loss in review["energy_losses"]:
        assert f">{money(loss['energy_cost_per_year'], loss['currency'])}</td>" in html

    plan = client.get("/plan.json").get_json()
    html = _html(client, "/plan")
    costed = [p for p in plan["pumps"] if p["overhaul_cost"] is not None]
    assert costed
    for pump in costed:
        assert f'data-label="Overhaul cost">{money(pump["overhaul_cost"], pump["currency"])}</td>' in html
    for total in plan["totals"]:
        assert f'<td class="num">{money(total["overhaul_cost"], total["currency"])}</td>' in html

    html = _html(client, "/register")
    register = client.get("/register.json").get_json()
    pump = next(p for p in register["pumps"] if p["overhaul_cost"] is not None and p["currency"])
    assert f'<td class="num">{money(pump["overhaul_cost"], pump["currency"])}</td>' in html


def test_a_pump_to_check_now_carries_the_caution_on_its_page_and_in_the_list(client):
    rows = _listed(client)
    urgent = [r for r in rows if calls_for_work(r["reasons"])]
    calm = [r for r in rows if r["status"] == "healthy" and not calls_for_work(r["reasons"])]
    past = [r for r in rows if r["status"] == "past_limit"]
    assert urgent and calm and past  # the invented demo plant has each
    for row in urgent + past[:1]:
        html = _html(client, f"/pumps/{row['pump']}")
        assert 'id="caution"' in html and all(_has(html, line) for line in CAUTIONS), row["pump"]
    assert 'id="caution"' not in _html(client, f"/pumps/{calm[0]['pump']}")
    listing = _html(client, "/")
    # Beside the reason, in the table and on the phone card, with a way to the full caution.
    assert listing.count(str(escape(CHECK_NOW_CAUTION))) == 2 * len(urgent)
    assert f'href="/pumps/{urgent[0]["pump"]}#caution"' in listing


def test_the_lab_result_form_carries_the_work_and_sampling_cautions(client):
    html = _html(client, "/register/sample/new")
    assert CAUTION_TITLE in html
    assert all(_has(html, line) for line in CAUTIONS + SAMPLING_CAUTIONS)
    # Only where samples are drawn: the event form keeps the plain caution.
    assert not _has(_html(client, "/register/event/new"), SAMPLING_CAUTIONS[0])


def test_the_routes_come_before_the_whole_cautions_on_the_rounds_page(client):
    """A technician on a phone sees the routes first; a reminder line above them points to the cautions below."""
    html = _html(client, "/rounds")
    reminder, routes = html.index(str(escape(RUNNING_REMINDER))), html.index('id="routes-title"')
    assert reminder < routes < html.index('id="caution-running"')
    assert 'href="#caution-running"' in html and all(_has(html, line) for line in RUNNING_CAUTIONS)


def test_round_form_shows_the_running_caution_and_hot_oil_caution(client, demo_db):
    location = _make_route(client)
    html = _html(client, location)
    assert all(_has(html, line) for line in RUNNING_CAUTIONS)
    # A one-line reminder above the form on every stop, pointing to the whole caution below it.
    assert html.index(str(escape(RUNNING_REMINDER))) < html.index('class="reading-form"')
    assert 'href="#caution-running"' in html and 'id="caution-running"' in html
    hot = client.post(f"{location}/stops/1", data=_plausible_form(demo_db, FIRST, oil_temp="95"))
    assert hot.status_code == 200
    page = hot.get_data(as_text=True)
    notice = page[page.index('id="form-doubts"'):page.index("</div>", page.index('id="form-doubts"'))]
    assert _has(notice, HOT_OIL_CAUTION) and 'href="#caution"' in notice
    cold = client.post(f"{location}/stops/1", data=_plausible_form(demo_db, FIRST, oil_temp="2"))
    page = cold.get_data(as_text=True)
    assert "Please look again before saving." in page and not _has(page, HOT_OIL_CAUTION)


def test_round_form_shows_the_over_pressure_caution_beside_a_pressure_above_rated(client, demo_db):
    """A gauge above the pump's rated pressure: the look-again question carries the caution about hoses and
    fittings loaded past their design (fleet.safety), on the page and in the rules the device checks with."""
    from sqlalchemy import select

    from fleet.db.models import Pump

    location = _make_route(client)
    with demo_db.sessions() as session:
        rated = session.scalar(select(Pump.rated_pressure_bar).where(Pump.serial == FIRST))
    high = client.post(f"{location}/stops/1", data=_plausible_form(demo_db, FIRST,
                                                                    outlet_pressure=f"{1.3 * rated:.0f}"))
    assert high.status_code == 200
    page = high.get_data(as_text=True)
    notice = page[page.index('id="form-doubts"'):page.index("</div>", page.index('id="form-doubts"'))]
    assert "above the rated" in notice and _has(notice, OVER_PRESSURE_CAUTION) and not _has(notice, HOT_OIL_CAUTION)
    within = client.post(f"{location}/stops/1", data=_plausible_form(demo_db, FIRST, oil_temp="95"))
    assert not _has(within.get_data(as_text=True), OVER_PRESSURE_CAUTION)
    route_id = int(location.rstrip("/").split("/")[-1])
    assert client.get(f"/rounds/{route_id}/rules.json").get_json()["over_pressure_caution"] == OVER_PRESSURE_CAUTION


def _flat(text: str) -> str:
    return " ".join(text.split())


def test_the_terminal_round_and_service_list_show_the_cautions(demo_db):
    from tests.test_cli_jobs import ROUTE, _answers, _route

    serials, pumps, hours = _route(demo_db)
    first, *others = serials
    lines = _answers(pumps[first], hours[first], oil_temp="95") + ["y"] + ["skip"] * len(others)
    result = CliRunner().invoke(main, ["--database", demo_db.url, "round", ROUTE], input="\n".join(lines) + "\n")
    assert result.exit_code == 0, result.output
    text = _flat(result.output)
    assert all(line in text for line in RUNNING_CAUTIONS + CAUTIONS)
    assert text.index(RUNNING_CAUTIONS[0]) < text.index("[1/")  # before the first pump
    assert f"! {HOT_OIL_CAUTION}" in text

    listed = CliRunner().invoke(main, ["--database", demo_db.url, "analyze", "--stored"])
    assert listed.exit_code == 0, listed.output
    assert f"! {CHECK_NOW_CAUTION}" in _flat(listed.output)
    assert re.search(r"\b\d{1,3}\.\d %", listed.output)  # η_v,ref as a percentage
