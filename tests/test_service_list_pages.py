"""The whole service list's pages in the service order, found on the order keys' index
(service_list._urgency_page), against the query the page ran before: every pump joined, sorted by key (keyless
last) and serial, then cut to the page. On the invented demo plant, with some pumps without a key or an analysis."""

from sqlalchemy import delete, select, update

from fleet.db.models import AnalysisResult, Pump
from fleet.services.pages.service_list import ListQuery, _urgency_page, service_list


def _reference(session, first: int, size: int) -> list[int]:
    return list(session.scalars(select(Pump.id).outerjoin(AnalysisResult, AnalysisResult.pump_id == Pump.id)
                                .order_by(AnalysisResult.order_key.nulls_last(), Pump.serial)
                                .offset(first).limit(size)))


def _every_page_agrees(session, total: int) -> None:
    for size in (1, 7, 12, 50):
        for first in range(0, total + size, size):
            assert _urgency_page(session, first, size) == _reference(session, first, size), (first, size)


def test_every_page_holds_the_pumps_the_joined_query_gave_in_its_order(demo_db):
    with demo_db.sessions.begin() as session:
        pumps = list(session.scalars(select(Pump.id).order_by(Pump.id)))
        _every_page_agrees(session, len(pumps))
        # Pumps whose analysis is missing or unkeyed (stored before keys existed) come last, by serial.
        session.execute(delete(AnalysisResult).where(AnalysisResult.pump_id.in_(pumps[::7])))
        session.execute(update(AnalysisResult).where(AnalysisResult.pump_id.in_(pumps[1::5])).values(order_key=None))
        _every_page_agrees(session, len(pumps))
        shown = [p["pump"] for page in (1, 2, 3, 4, 5) for p in service_list(session, ListQuery(
            page=page, page_size=10))["pumps"]]
        serial_of = dict(session.execute(select(Pump.id, Pump.serial)).all())
        assert shown == [serial_of[p] for p in _reference(session, 0, 50)]
        session.rollback()
