"""One set of rules for every door: a form, a CSV file and the readings API refuse the same values in the same
words, and no door lets a non-finite number through. The demo plant and every value are invented."""

from click.testing import CliRunner
from sqlalchemy import func, select

from fleet.cli import main
from fleet.db.models import LimitDefault, Oil, Pump

NOT_FINITE = ("inf", "-Infinity", "1e999", "nan")


def _reasons(response) -> str:
    return response.get_data(as_text=True)


def test_no_form_takes_a_number_that_is_not_finite(client, demo_db):
    for bad in NOT_FINITE:
        response = client.post("/register/oil/new", data={"name": f"Invented {bad}", "viscosity_40": bad,
                                                          "viscosity_100": "6.8", "iso_vg": bad})
        assert response.status_code == 400, bad
        assert "is not a finite number of a sensible size" in _reasons(response) or \
            "is not a number" in _reasons(response), bad
        limits = client.get("/register/limits/vane/edit.json").get_json()["fields"]
        values = {f["name"]: f["value"] for f in limits} | {"oil_temp_max": bad}
        assert client.post("/register/limits/vane/edit", data=values).status_code == 400, bad
    with demo_db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Oil).where(Oil.name.like("Invented %"))) == 0
        assert session.get(LimitDefault, "vane").oil_temp_max_c < 1000


def test_a_bad_value_gets_the_same_words_from_a_form_and_a_file(client, demo_db, tmp_path):
    # The oil form (form-only rules) and the pumps CSV (the importer) share the oil's columns and rules.
    form = client.post("/register/oil/new", data={"name": "Invented thick", "viscosity_40": "32",
                                                  "viscosity_100": "40", "density_15": "2.5"})
    with demo_db.sessions() as session:
        pump = session.scalars(select(Pump).order_by(Pump.serial)).first()
        place = pump.installations[-1].position
        row = (f"{pump.serial},{place.machine.site.name},{place.machine.name},{place.name},{pump.kind},"
               f"{pump.displacement_cc},{pump.rated_speed_rpm},{pump.rated_pressure_bar},Invented thick,32,40,2.5")
    path = tmp_path / "pumps.csv"
    path.write_text("pump,site,machine,position,kind,displacement,rated_speed,rated_pressure,oil,viscosity_40,"
                    f"viscosity_100,density_15\n{row}\n")
    result = CliRunner().invoke(main, ["--database", demo_db.url, "import", "pumps", str(path)])
    assert result.exit_code == 1
    for words in ("must be below viscosity_40 (oil thins as it warms)",
                  "2.5 is above the highest allowed value (1.3 kg/L)"):
        assert words in _reasons(form) and words in result.output, words


def test_limits_refuse_what_the_pumps_file_refuses(client, demo_db, tmp_path):
    limits = {f["name"]: f["value"] for f in client.get("/register/limits/vane/edit.json").get_json()["fields"]}
    response = client.post("/register/limits/vane/edit", data=limits | {"eta_v_limit": "1.2",
                                                                        "reading_interval_days": "7.5"})
    assert response.status_code == 400
    assert "1.2 is above the highest allowed value (0.999" in _reasons(response)
    assert "7.5 must be a whole number" in _reasons(response)
