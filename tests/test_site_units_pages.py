"""Display units per site: pages, chart axes and forms in the site's units (converted by pint), exports canonical
unless asked, and no 'degC' or 'eta v' on any screen. The invented demo site East Yard is switched to US units
here, through the importer."""

import csv
import io
import json
import re
from html.parser import HTMLParser

import pandas as pd
import pytest
from click.testing import CliRunner
from pint import UnitRegistry
from sqlalchemy import select

from fleet.cli import main
from fleet.db.models import Pump, Reading, Route, Site
from fleet.io.parse import parse_table
from fleet.services.transfer.importing import import_table
from fleet.services.writes import perform
from fleet.timeutil import utcnow

PUMP = "EY-104"  # invented demo pump at the invented site East Yard
SITE = "East Yard"
# The reference: pint's own registry, built here apart from fleet's (bar, psi, US gallon and degF as pint defines
# them after NIST SP 811).
ureg = UnitRegistry()


def _us_units(demo_db) -> None:
    row = {"site": SITE, "pressure_unit": "psi", "flow_unit": "gal/min", "temperature_unit": "degF"}
    perform(demo_db.sessions, lambda s: import_table(s, "sites", pd.DataFrame([row], dtype=str)))


def _pump(demo_db):
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == PUMP))
        last = session.scalars(select(Reading).where(Reading.pump_id == pump.id)
                               .order_by(Reading.taken_at.desc())).first()
        return pump, last


def _number(text: str) -> float:
    return float(text.replace(",", ""))


class _Visible(HTMLParser):
    """The text a reader sees: element text, option labels, titles and placeholders; not scripts or styles."""

    def __init__(self):
        super().__init__()
        self.parts, self._skip = [], 0

    def handle_starttag(self, tag, attrs):
        if tag in {"script", "style"}:
            self._skip += 1
        for name, value in attrs:
            if name in {"title", "placeholder", "aria-label", "alt"} and value:
                self.parts.append(value)

    def handle_endtag(self, tag):
        if tag in {"script", "style"}:
            self._skip -= 1

    def handle_data(self, data):
        if not self._skip:
            self.parts.append(data)


def _chart_words(html: str) -> list[str]:
    """Axis titles, trace names and annotations of the page's charts: they reach the screen too."""
    words = []
    for spec in re.findall(r'<script type="application/json" class="fleet-chart-spec"[^>]*>(.*?)</script>', html,
                           flags=re.S):
        figure = json.loads(spec)
        words += [trace.get("name", "") for trace in figure["data"]]
        layout = figure["layout"]
        for axis in ("xaxis", "yaxis"):
            words.append(str((layout.get(axis, {}).get("title") or {}).get("text", "")))
        words += [a.get("text", "") for a in layout.get("annotations", [])]
    return words


FORBIDDEN = re.compile(r"degC|degF|deg C|eta[ _]v|\*\*[23]", re.IGNORECASE)


def test_no_page_shows_unit_spellings_or_eta_v_in_letters(client, demo_db):
    _us_units(demo_db)
    client.post("/rounds", data={"name": "Scan walk", "pumps": PUMP})
    with demo_db.sessions() as session:
        route_id = session.scalar(select(Route.id))
        site_id = session.scalar(select(Site.id).where(Site.name == SITE))
    pages = ["/", f"/pumps/{PUMP}", "/pumps/EY-301", "/rounds", f"/rounds/{route_id}", "/review", "/plan",
             "/forecasts", "/register", f"/register/site/{site_id}/edit", "/register/site/new",
             "/register/pump/new", "/trash", "/outbox", "/account"]
    checked = 0
    for path in pages:
        response = client.get(path)
        if response.status_code == 404:  # a page another part of the app may not have
            continue
        assert response.status_code == 200, path
        html = response.get_data(as_text=True)
        parser = _Visible()
        parser.feed(html)
        shown = " ".join(parser.parts + _chart_words(html))
        assert not FORBIDDEN.search(shown), (path, FORBIDDEN.search(shown).group(0))
        checked += 1
    assert checked >= 12
    # The scan can fail: the same words in a page's text are caught.
    parser = _Visible()
    parser.feed("<p>oil at 50 degC, eta v 0.9</p><script>var degC = 1</script>")
    assert FORBIDDEN.findall(" ".join(parser.parts)) == ["degC", "eta v"]


def test_pump_page_shows_the_site_units_converted_by_pint(client, demo_db):
    _us_units(demo_db)
    pump, last = _pump(demo_db)
    html = client.get(f"/pumps/{PUMP}").get_data(as_text=True)
    rated_psi = ureg.Quantity(pump.rated_pressure_bar, "bar").to("psi").magnitude
    assert f"<dt>Rated pressure</dt><dd>{rated_psi:,.0f} psi</dd>" in html
    ref_f = ureg.Quantity(pump.reference_temp_c, "degC").to("degF").magnitude
    assert f"<dt>Reference oil temperature</dt><dd>{ref_f:,.0f} °F</dd>" in html
    # The readings table: its headers name the site's units, its newest row is the newest reading converted.
    assert '<th scope="col" class="num">psi</th>' in html and "Flow US gal/min" in html
    row = html[html.index("<tbody>", html.index('class="readings"')):]
    cells = re.findall(r'<td class="num">([^<]*)</td>', row)[:6]
    assert _number(cells[1]) == pytest.approx(ureg.Quantity(last.pressure_bar, "bar").to("psi").magnitude, abs=0.5)
    assert _number(cells[3]) == pytest.approx(ureg.Quantity(last.flow_lpm, "L/min").to("gal/min").magnitude,
                                              abs=0.05)
    assert _number(cells[5]) == pytest.approx(ureg.Quantity(last.temp_c, "degC").to("degF").magnitude, abs=0.5)
    # The temperature chart's axis and points are in degF too.
    titles = _chart_words(html)
    assert "oil temperature (°F)" in titles
    spec = next(json.loads(s) for s in re.findall(r'class="fleet-chart-spec" data-for="chart-temperature">(.*?)'
                                                   r'</script>', html, flags=re.S))
    points = spec["data"][0]["y"]
    values = points if isinstance(points, list) else None
    if values is None:  # plotly may write arrays as typed binary; the JSON twin is the check then
        return
    assert values[-1] == pytest.approx(ureg.Quantity(last.temp_c, "degC").to("degF").magnitude, rel=1e-9)


def test_pump_csv_stays_canonical_unless_site_units_are_asked_for(client, demo_db):
    _us_units(demo_db)
    _, last = _pump(demo_db)
    plain = list(csv.DictReader(io.StringIO(client.get(f"/pumps/{PUMP}.csv").get_data(as_text=True))))
    assert float(plain[-1]["outlet_pressure_bar"]) == pytest.approx(last.pressure_bar)
    site = list(csv.DictReader(io.StringIO(client.get(f"/pumps/{PUMP}.csv?units=site").get_data(as_text=True))))
    assert "outlet_pressure_bar" not in site[-1]
    assert float(site[-1]["outlet_pressure [psi]"]) == pytest.approx(
        ureg.Quantity(last.pressure_bar, "bar").to("psi").magnitude, rel=1e-9)
    assert float(site[-1]["oil_temp [degF]"]) == pytest.approx(
        ureg.Quantity(last.temp_c, "degC").to("degF").magnitude, rel=1e-9)
    assert all(len(row["outlet_pressure [psi]"].replace(".", "").strip("0")) <= 12 for row in site)


def test_cli_export_in_site_units_for_one_site_and_refused_for_mixed_sites(demo_db, monkeypatch):
    _us_units(demo_db)
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    runner = CliRunner()
    canonical = list(csv.DictReader(io.StringIO(runner.invoke(main, ["export", "readings", "-"]).output)))
    assert "outlet_pressure [bar]" in canonical[0]
    mixed = runner.invoke(main, ["export", "readings", "-", "--units", "site"])
    assert mixed.exit_code != 0
    assert "show pressure in different units (East Yard in psi, River Shop in bar)" in mixed.output
    result = runner.invoke(main, ["export", "readings", "-", "--units", "site", "--site", SITE])
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(io.StringIO(result.output)))
    assert {"outlet_pressure [psi]", "outlet_flow [gal/min]", "oil_temp [degF]"} <= set(rows[0])
    _, last = _pump(demo_db)
    mine = [r for r in rows if r["pump"] == PUMP][-1]
    assert float(mine["outlet_pressure [psi]"]) == pytest.approx(
        ureg.Quantity(last.pressure_bar, "bar").to("psi").magnitude, rel=1e-9)
    # No unit factor's noise in a file people read: at most 12 significant digits (2386.0, not 2386.0000000000014).
    for row in rows:
        for name in ("outlet_pressure [psi]", "outlet_flow [gal/min]", "oil_temp [degF]"):
            assert not row[name] or len(row[name].lstrip("-").replace(".", "").strip("0")) <= 12, row[name]
    # The file in psi imports back as the same bar values (the header carries the unit).
    again = pd.read_csv(io.StringIO(result.output), dtype=str, keep_default_na=False)
    parsed, problems = parse_table("readings", again)
    assert problems == []
    first = [r for r in canonical if r["pump"] == rows[0]["pump"]][0]
    assert parsed.data["outlet_pressure"].iloc[0] == pytest.approx(float(first["outlet_pressure [bar]"]), rel=1e-9)


def test_site_form_offers_units_by_their_shown_names_and_refuses_a_bad_zone(client, demo_db):
    with demo_db.sessions() as session:
        site_id = session.scalar(select(Site.id).where(Site.name == SITE))
    html = client.get(f"/register/site/{site_id}/edit").get_data(as_text=True)
    assert '<option value="degF" >°F</option>' in html and '<option value="gal/min" >US gal/min</option>' in html
    response = client.post(f"/register/site/{site_id}/edit", data={
        "site": SITE, "currency": "EUR", "time_zone": "Mars/Olympus", "pressure_unit": "psi", "flow_unit": "L/min",
        "temperature_unit": "degF", "decimal_comma": "yes"})
    assert response.status_code == 400
    assert "is not an IANA time zone name" in response.get_data(as_text=True)
    with demo_db.sessions() as session:
        site = session.get(Site, site_id)
        assert (site.time_zone, site.pressure_unit, site.decimal_comma) == ("UTC", "bar", False)  # nothing half-set
    saved = client.post(f"/register/site/{site_id}/edit", data={
        "site": SITE, "currency": "EUR", "time_zone": "America/Chicago", "pressure_unit": "psi",
        "flow_unit": "gal/min", "temperature_unit": "degF", "decimal_comma": "yes"})
    assert saved.status_code == 302
    with demo_db.sessions() as session:
        site = session.get(Site, site_id)
        assert (site.time_zone, site.pressure_unit, site.flow_unit, site.temperature_unit, site.decimal_comma) == \
            ("America/Chicago", "psi", "gal/min", "degF", True)
    # Unticking the box turns the comma off again.
    client.post(f"/register/site/{site_id}/edit", data={
        "site": SITE, "currency": "EUR", "time_zone": "America/Chicago", "pressure_unit": "psi",
        "flow_unit": "gal/min", "temperature_unit": "degF"})
    with demo_db.sessions() as session:
        assert session.get(Site, site_id).decimal_comma is False


def test_rounds_form_offers_the_site_units_first_and_takes_values_in_them(client, demo_db):
    _us_units(demo_db)
    location = client.post("/rounds", data={"name": "US walk", "pumps": PUMP}).headers["Location"]
    html = client.get(location).get_data(as_text=True)
    assert '<option value="psi" selected>psi</option>' in html
    assert '<option value="degF" selected>°F</option>' in html
    assert '<option value="gal/min" selected>US gal/min</option>' in html
    # Values typed with no unit choice sent (a device-side form that shows only the site's units) are read in them.
    pump, last = _pump(demo_db)
    psi = 0.8 * ureg.Quantity(pump.rated_pressure_bar, "bar").to("psi").magnitude
    gpm = 0.9 * ureg.Quantity(pump.displacement_cc * pump.rated_speed_rpm / 1000, "L/min").to("gal/min").magnitude
    form = {"taken_at": f"{utcnow():%Y-%m-%dT%H:%M}", "hours": f"{last.hours + 8:.1f}", "outlet_pressure": f"{psi:.1f}",
            "speed": f"{pump.rated_speed_rpm:.0f}", "outlet_flow": f"{gpm:.2f}", "oil_temp": "122", "action": "confirm",
            "confirmed": "flow_above_theoretical,pressure_above_rated,temperature_outside_limits,hours_backwards"}
    response = client.post(f"{location}/stops/1", data=form)
    assert response.status_code == 302, response.get_data(as_text=True)
    _, stored = _pump(demo_db)
    assert stored.pressure_bar == pytest.approx(ureg.Quantity(round(psi, 1), "psi").to("bar").magnitude, rel=1e-9)
    assert stored.flow_lpm == pytest.approx(ureg.Quantity(round(gpm, 2), "gal/min").to("L/min").magnitude, rel=1e-9)
    assert stored.temp_c == pytest.approx(50.0, abs=1e-9)  # 122 degF = 50 degC (pint)
