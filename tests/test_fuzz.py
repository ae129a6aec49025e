"""Property-based fuzz of every input path that writes: the CSV importer (every kind) and POST /api/readings.

Generated tables and bodies mix good cells with bad ones: odd units, unicode, control characters, huge and
non-finite numbers, impossible dates, blanks, duplicate and unknown headers. The properties: the importer raises
nothing but ImportRejected, the API never answers 500, and a rejected input writes nothing at all.
"""

from datetime import datetime
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from fleet.db import models
from fleet.io.columns import KINDS
from fleet.io.parse import ImportRejected
from fleet.services.analysis import refresh_analysis
from fleet.services.transfer.importing import import_file, import_table

DATA = Path(__file__).parent / "data"
SERIALS = ("T-101", "T-102", "T-103")  # invented test pumps of tests/data/pumps_small.csv
COUNTED = (models.Site, models.Oil, models.Machine, models.Position, models.Pump, models.Installation,
           models.Reading, models.FlowTestPoint, models.OilSample, models.MaintenanceEvent, models.AuditRecord)

# --- cells ---------------------------------------------------------------------------------------------------

_weird_text = st.text(alphabet=st.characters(codec="utf-8", exclude_categories=("Cs",)), max_size=24)
_huge_numbers = st.sampled_from(["1e308", "1e309", "-1e309", "1e-320", "9" * 400, "inf", "-inf", "NaN", "nan",
                                 "Infinity", "0x1A", "1_000", "1,5", "١٢٣", "+-3", "--1", "1e", ".", "-0", "  7  "])
_odd_dates = st.sampled_from(["2024-02-30", "2023-13-01", "0001-01-01", "9999-12-31 23:59", "1969-12-31",
                              "2024-01-01T25:00", "2024-06-01 08:15+14:00", "2024-06-01Z", "yesterday", "2024",
                              "2024-06-01 08:15:00.123456789", "20240601", "1e10"])


def _good_number(column) -> st.SearchStrategy[str]:
    low = column.min if column.min is not None else (0.001 if column.positive else 0.0)
    high = column.max if column.max is not None else 5000.0
    return st.floats(low + (1e-6 if column.positive else 0), high, allow_nan=False).map(lambda x: f"{x:.6g}")


def _good_cell(kind: str, column) -> st.SearchStrategy[str]:
    if column.name == "pump":
        return st.sampled_from(SERIALS + ("T-999",))
    if column.name == "site":
        return st.sampled_from(["Test Works (invented)", "Elsewhere (invented)"])
    if column.name == "machine":
        return st.sampled_from(["Press 1", "Power unit 2", "Press 9"])
    if column.name in ("position", "oil"):
        return st.sampled_from(["main", "pilot", "Test oil 46"])
    if column.type == "number":
        return _good_number(column)
    if column.type == "datetime":
        return st.datetimes(datetime(2020, 1, 1), datetime(2025, 12, 31)).map(
            lambda d: d.isoformat(sep=" ", timespec="minutes"))
    if column.type == "bool":
        return st.sampled_from(["yes", "no", "TRUE", "0", "x", ""])
    if column.type == "kind":
        return st.sampled_from(["vane", "Axial piston", "external-gear", "turbine"])
    if column.type == "event_kind":
        return st.sampled_from(["overhaul", "Seal repair", "inspection", "repainting"])
    if column.type == "failure_mode":
        return st.sampled_from(["noise", "internal leakage", "", "gremlins"])
    if column.type == "source":
        return st.sampled_from(["form", "API", "import", "fax"])
    if column.type == "iso4406":
        return st.sampled_from(["18/16/13", "-/16/13", "≥22/20/17", "17/15", "30/29/40", "a/b/c", "13/16/18"])
    return _weird_text


def _cell(kind: str, column) -> st.SearchStrategy[str]:
    return st.one_of(_good_cell(kind, column), _good_cell(kind, column), _weird_text, _huge_numbers, _odd_dates,
                     st.just(""), st.just("<script>alert(1)</script>"), st.just("'; DROP TABLE reading; --"))


_units = st.sampled_from([None, None, None, "bar", "psi", "gal/min", "gpm", "degF", "K", "1/min", "Hz", "%",
                          "in3/rev", "cSt", "furlong", "kg", "m**3/s", "1/(100 mL)", "ppm", "min", "°C", "²",
                          "", "barg ", "μm", "1/0", "meter)", "(", "**", "e"])


@st.composite
def import_tables(draw) -> tuple[str, pd.DataFrame]:
    kind = draw(st.sampled_from(sorted(KINDS)))
    specs = KINDS[kind]
    chosen = [c for c in specs if (c.required and draw(st.integers(0, 9)) > 0) or draw(st.booleans())]
    headers, columns = [], []
    for column in chosen:
        unit = draw(_units) if column.quantity or draw(st.integers(0, 5)) == 0 else None
        headers.append(f"{column.name} [{unit}]" if unit is not None else column.name)
        columns.append(column)
    if headers and draw(st.integers(0, 5)) == 0:  # a duplicate header
        at = draw(st.integers(0, len(headers) - 1))
        headers.append(headers[at])
        columns.append(columns[at])
    if draw(st.integers(0, 5)) == 0:  # a header fleet does not know, or a broken one
        headers.append(draw(st.sampled_from(["colour", "[bar]", "hours [[h]]", "Ünïcode ✓", "", "pump ]"])))
        columns.append(None)
    n_rows = draw(st.integers(0, 12))
    rows = []
    for _ in range(n_rows):
        cell = _good_cell if draw(st.integers(0, 2)) == 0 else _cell  # some rows wholly plausible
        rows.append([draw(cell(kind, c)) if c is not None else draw(_weird_text) for c in columns])
    table = pd.DataFrame(rows, columns=range(len(headers)), dtype=str)
    table.columns = headers  # may repeat, as a hand-made CSV can
    return kind, table


def _counts(session) -> dict[str, int]:
    return {model.__tablename__: session.scalar(select(func.count()).select_from(model)) for model in COUNTED}


@pytest.fixture
def small_register(db):
    with db.sessions.begin() as session:
        import_file(session, "pumps", DATA / "pumps_small.csv")
    return db


# derandomize: the same generated cases on every run and machine (CI sets Hypothesis's own CI profile), so the
# counts below are a property of the test, not of luck.
FUZZ_SETTINGS = dict(deadline=None, derandomize=True,
                     suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


def test_csv_import_of_any_table_rejects_cleanly_or_writes_it_whole(small_register):
    rows_fuzzed, accepted = [], []

    @settings(max_examples=400, **FUZZ_SETTINGS)
    @given(generated=import_tables())
    def check(generated):
        kind, table = generated
        rows_fuzzed.append(len(table))
        with small_register.sessions() as session:
            before = _counts(session)
            try:
                result = import_table(session, kind, table, now=datetime(2026, 1, 1))
            except ImportRejected as rejected:
                assert rejected.problems, "a rejection names at least one problem"
                for problem in rejected.problems:
                    assert problem.row >= 1 and problem.reason
                assert _counts(session) == before  # nothing half-written inside the transaction
            else:
                assert result.rows == len(table)
                accepted.append(kind)
                if kind in WRITTEN_TABLE:
                    assert _counts(session)[WRITTEN_TABLE[kind]] == before[WRITTEN_TABLE[kind]] + len(table)
                refresh_analysis(session, pump_ids=sorted(result.pump_ids))  # what every import is followed by
            finally:
                session.rollback()

    check()
    print(f"\nCSV import fuzz: {sum(rows_fuzzed)} generated rows in {len(rows_fuzzed)} tables, "
          f"{len(accepted)} accepted whole")
    assert sum(rows_fuzzed) >= 1500


WRITTEN_TABLE = {"readings": "reading", "events": "maintenance_event", "flowtests": "flow_test_point"}


# --- the JSON API ------------------------------------------------------------------------------------------

API_FIELDS = [c for c in KINDS["readings"] if c.name != "source"]
_json_scalar = st.one_of(st.none(), st.booleans(), st.integers(-10**20, 10**20), st.floats(),
                         _weird_text, _huge_numbers, _odd_dates)
_with_unit = st.fixed_dictionaries({"value": _json_scalar, "unit": st.one_of(st.none(), _units, st.integers())})


@st.composite
def api_bodies(draw):
    def reading():
        if draw(st.integers(0, 3)) == 0:  # a plausible reading of a demo pump, to exercise the accepting path
            return {"pump": draw(st.sampled_from(["EY-101", "EY-104", "EY-105"])),
                    "taken_at": draw(st.datetimes(datetime(2024, 1, 1), datetime(2025, 1, 1))).isoformat(),
                    "hours": draw(st.floats(0, 90_000)), "outlet_pressure": draw(st.floats(1, 300)),
                    "speed": draw(st.floats(100, 3000)), "oil_temp": draw(st.floats(0, 90))}
        item = {}
        for column in API_FIELDS:
            if not (column.required or draw(st.booleans())) or draw(st.integers(0, 12)) == 0:
                continue
            value = draw(st.one_of(_good_cell("readings", column), _json_scalar, _with_unit,
                                   st.lists(_json_scalar, max_size=2)))
            if column.type == "number" and isinstance(value, str) and draw(st.booleans()):
                try:
                    value = float(value)
                except ValueError:
                    pass
            item[column.name] = value
        if draw(st.integers(0, 10)) == 0:
            item[draw(_weird_text)] = draw(_json_scalar)
        if draw(st.integers(0, 3)) == 0:  # a device's id: a few shared ones provoke repeats and conflicts
            item["client_id"] = draw(st.one_of(st.sampled_from(["device-1", "device-2"]), _weird_text, _json_scalar))
        if draw(st.integers(0, 6)) == 0:
            item["place"] = draw(st.one_of(_json_scalar, st.fixed_dictionaries(
                {part: st.one_of(st.none(), _weird_text) for part in ("site", "machine", "position")})))
        return item

    count = draw(st.integers(1, 40) if draw(st.booleans()) else st.integers(1, 3))
    items = [reading() for _ in range(count)]
    if draw(st.integers(0, 15)) == 0:
        items.append(draw(st.sampled_from([None, 5, "text", [], [{}]])))
    return items


def test_api_answers_every_body_without_a_server_error_and_all_or_nothing(api_client, demo_db):
    objects_fuzzed, accepted = [], []

    @settings(max_examples=250, **FUZZ_SETTINGS)
    @given(items=api_bodies())
    def check(items):
        objects_fuzzed.append(len(items))
        with demo_db.sessions() as session:
            before = _counts(session)
        response = api_client.post("/api/readings", json=items)
        assert response.status_code in (200, 201, 400, 409, 413, 422), response.get_data(as_text=True)[:500]
        assert response.is_json
        with demo_db.sessions() as session:
            after = _counts(session)
        if response.status_code in (200, 201):  # 200: every reading a repeat of one stored under its client_id
            accepted.append(len(items))
            assert after["reading"] == before["reading"] + response.get_json()["created"]
        else:
            assert response.get_json()["problems"]
            assert after == before

    check()
    print(f"\nAPI fuzz: {sum(objects_fuzzed)} generated reading objects in {len(objects_fuzzed)} requests, "
          f"{len(accepted)} accepted whole")
    assert sum(objects_fuzzed) >= 1500


@pytest.fixture
def api_client(client):
    return client


# --- crashes the fuzz found, kept as plain examples -------------------------------------------------------

def _one_reading(**cells) -> pd.DataFrame:
    row = {"pump": "T-101", "taken_at": "2025-01-01 08:00", "hours": "100", "outlet_pressure": "150",
           "speed": "1500", "oil_temp": "50", "outlet_flow": "60"}
    row.update(cells)
    return pd.DataFrame({k: [v] for k, v in row.items()}, dtype=str)


@pytest.mark.parametrize("column, cell", [("hours", "1e309"), ("outlet_flow", "inf"), ("speed", "1e308"),
                                          ("outlet_pressure", "9" * 40), ("case_drain_flow", "-Infinity")])
def test_infinite_and_huge_numbers_are_refused_naming_the_column(small_register, column, cell):
    with small_register.sessions() as session:
        before = _counts(session)
        with pytest.raises(ImportRejected) as rejected:
            import_table(session, "readings", _one_reading(**{column: cell}), now=datetime(2026, 1, 1))
        (problem,) = rejected.value.problems
        assert (problem.row, problem.column) == (2, column) and "finite number" in problem.reason
        assert _counts(session) == before


def test_text_longer_than_its_column_is_refused_naming_it(small_register):
    with small_register.sessions() as session, pytest.raises(ImportRejected) as rejected:
        import_table(session, "sites", pd.DataFrame({"site": ["Test Works (invented)"], "currency": ["000000000"]}))
    (problem,) = rejected.value.problems
    assert (problem.row, problem.column, problem.reason) == (2, "currency", "is 9 characters long; at most 8 fit")


def test_a_nul_character_is_refused_before_it_reaches_the_database(small_register):
    with small_register.sessions() as session, pytest.raises(ImportRejected) as rejected:
        import_table(session, "readings", _one_reading(pump="T-1\x0001"), now=datetime(2026, 1, 1))
    assert [(p.row, p.column, p.reason) for p in rejected.value.problems] == \
        [(2, "pump", "contains a NUL character (0x00)")]


def test_a_table_with_a_repeated_header_is_refused_not_crashed(small_register):
    table = _one_reading()
    table.insert(1, "pump ", ["T-102"], allow_duplicates=True)
    table.columns = ["pump", "pump", *table.columns[2:]]
    with small_register.sessions() as session, pytest.raises(ImportRejected) as rejected:
        import_table(session, "readings", table, now=datetime(2026, 1, 1))
    assert [(p.row, p.column) for p in rejected.value.problems] == [(1, "pump")]
    assert "appears twice" in rejected.value.problems[0].reason
