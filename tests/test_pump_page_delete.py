"""From the pump page an engineer deletes a wrong reading; it waits in the trash and comes back whole."""

import re

from sqlalchemy import func, select

from fleet.db.models import Pump, Reading
from tests.conftest import sign_in

SERIAL = "EY-104"  # an invented demo pump


def _count(demo_db) -> int:
    with demo_db.sessions() as session:
        return session.scalar(select(func.count()).select_from(Reading).join(Pump).where(Pump.serial == SERIAL))


def test_engineer_deletes_from_the_pump_page_and_restores_from_the_trash(client, demo_db):
    page = client.get(f"/pumps/{SERIAL}").get_data(as_text=True)
    actions = re.findall(rf'action="(/pumps/{SERIAL}/readings/(\d+)/delete)"', page)
    assert actions and 'name="csrf_token"' in page  # one delete form per shown reading, each with its CSRF field
    action, reading_id = actions[0]
    before = _count(demo_db)
    assert client.post(action).status_code in (200, 302)
    assert _count(demo_db) == before - 1
    trash = client.get("/trash.json").get_json()
    record = next(r for r in trash["deleted"] if r["row_id"] == int(reading_id) and r["what"] == "reading")
    assert client.post(f"/trash/{record['id']}/restore").status_code in (200, 302)
    assert _count(demo_db) == before
    with demo_db.sessions() as session:
        assert session.get(Reading, int(reading_id)) is not None  # back with its own id


def test_no_delete_buttons_for_a_technician(client):
    sign_in(client, "technician")
    page = client.get(f"/pumps/{SERIAL}").get_data(as_text=True)
    assert "/delete" not in page
