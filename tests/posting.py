"""A reading posted to POST /api/readings for a demo pump, as a round would send it: the tests of what a post
stores and refreshes share it."""

from datetime import timedelta

from sqlalchemy import select

from fleet.db.models import Pump, Reading
from fleet.timeutil import utcnow


def post_reading(client, demo_db, serial: str, *, hours_added: float, flow_share: float, minutes_ago: int) -> None:
    """Post a reading of ``serial`` taken ``minutes_ago`` minutes ago, ``hours_added`` running hours after its
    latest, at 150 bar, rated speed and 50 degC, its outlet flow ``flow_share`` of displacement x speed."""
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == serial))
        last = session.scalar(select(Reading.hours).where(Reading.pump_id == pump.id)
                              .order_by(Reading.hours.desc()).limit(1))
        speed, displacement = pump.rated_speed_rpm, pump.displacement_cc
    body = {"pump": serial, "taken_at": (utcnow() - timedelta(minutes=minutes_ago)).isoformat(timespec="minutes"),
            "hours": last + hours_added, "outlet_pressure": 150, "speed": speed,
            "outlet_flow": round(flow_share * displacement * speed / 1000.0, 2), "oil_temp": 50}
    response = client.post("/api/readings", json=body)
    assert response.status_code == 201, response.get_data(True)
