"""Several technicians saving at once on one SQLite file: no reading lost, no writer sees an error."""

import threading
from datetime import datetime, timedelta

import pandas as pd
import pytest
from sqlalchemy import func, select
from sqlalchemy.exc import OperationalError

from fleet.db.engine import is_transient, make_engine, make_session_factory
from fleet.db.models import AnalysisResult, Pump, Reading
from fleet.db.transaction import run_write
from fleet.services.analysis import stale_pumps
from fleet.services.rounds import save_readings

WRITERS = 8
READINGS_PER_WRITER = 8
START = datetime(2030, 1, 1)  # after every demo reading; "now" is passed explicitly so these are not future


def _reading_table(serial: str, writer: int, n: int) -> pd.DataFrame:
    """One reading as the round form sends it (text cells); plausible values for any demo pump."""
    return pd.DataFrame({
        "pump": [serial], "taken_at": [(START + timedelta(hours=writer * 1000 + n)).isoformat(timespec="minutes")],
        "hours": [str(90_000 + writer * 1000 + n)], "outlet_pressure": ["150"], "speed": ["1480"],
        "oil_temp": ["48"], "taken_by": [f"technician {writer} (invented)"],
    }, dtype=str)


@pytest.mark.slow
def test_eight_technicians_saving_at_once_lose_nothing(demo_db):
    with demo_db.sessions() as session:
        serials = list(session.scalars(select(Pump.serial).order_by(Pump.serial).limit(WRITERS)))
        before = session.scalar(select(func.count()).select_from(Reading))
    errors: list[BaseException] = []
    barrier = threading.Barrier(WRITERS)

    def technician(writer: int) -> None:
        # Each writer has its own engine and connection, as separate web workers or handhelds would.
        engine = make_engine(demo_db.url)
        sessions = make_session_factory(engine)
        try:
            barrier.wait()
            for n in range(READINGS_PER_WRITER):
                save_readings(sessions, _reading_table(serials[writer], writer, n),
                              now=START + timedelta(days=3650))
        except BaseException as error:  # any error at all is a failure the test reports
            errors.append(error)
        finally:
            engine.dispose()

    threads = [threading.Thread(target=technician, args=(w,)) for w in range(WRITERS)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=300)
    assert errors == []
    with demo_db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Reading)) == before + WRITERS * READINGS_PER_WRITER
        for serial in serials:
            stored = session.scalar(select(func.count()).select_from(Reading).join(Pump)
                                    .where(Pump.serial == serial, Reading.taken_at >= START))
            assert stored == READINGS_PER_WRITER, serial
        # every writer's refresh stored its pump's analysis, from its newest data
        assert session.scalar(select(func.count()).select_from(AnalysisResult)
                              .join(Pump, Pump.id == AnalysisResult.pump_id)
                              .where(Pump.serial.in_(serials))) == WRITERS
        assert stale_pumps(session) == set()


def test_a_lock_error_runs_the_whole_unit_again_and_other_errors_do_not(db):
    calls = []

    def flaky(session):
        calls.append(1)
        session.execute(select(1))
        if len(calls) < 3:
            raise OperationalError("INSERT ...", {}, Exception("database is locked"))
        return "done"

    assert run_write(db.sessions, flaky) == "done" and len(calls) == 3

    def broken(session):
        calls.append(1)
        raise OperationalError("INSERT ...", {}, Exception("no such table: x"))

    calls.clear()
    with pytest.raises(OperationalError):
        run_write(db.sessions, broken)
    assert len(calls) == 1
    assert is_transient(OperationalError("x", {}, Exception("database is locked")))


def test_a_unit_that_stays_locked_gives_up_after_its_attempts(db):
    calls = []

    def always_locked(session):
        calls.append(1)
        raise OperationalError("INSERT ...", {}, Exception("database is locked"))

    with pytest.raises(OperationalError):
        run_write(db.sessions, always_locked, attempts=3)
    assert len(calls) == 3
