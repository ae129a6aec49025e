"""Stored analysis: full and partial refreshes agree, ranks stay whole, status changes are recorded."""

import datetime as dt

import pandas as pd
import pytest
from sqlalchemy import select, update

from fleet.db.models import AnalysisResult, Pump, Reading, StatusChange
from fleet.services.analysis import analysis_records, frames, refresh_analysis, stored_priors
from fleet.services.analysis.frames import driver_rows

FIELDS = ("status", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit", "hours_to_limit_low",
          "hours_to_limit_high", "limit_date", "governing_limit", "prior_hours_to_overhaul", "energy_cost_per_year")


def _by_pump(records):
    return {r["pump"]: r for r in records}


def test_partial_refresh_matches_the_full_one(demo_db):
    now = dt.datetime(2026, 12, 1, 12)
    with demo_db.sessions.begin() as session:
        refresh_analysis(session, now=now)
        full = _by_pump(analysis_records(session))
        ids = list(session.scalars(select(Pump.id).where(Pump.serial.in_(["EY-302", "RS-503", "EY-101"]))))
        summary = refresh_analysis(session, pump_ids=ids, now=now)
        assert not summary.full and summary.pumps == 3
        partial = _by_pump(analysis_records(session))
    for serial in ("EY-302", "RS-503", "EY-101"):
        for field in FIELDS:
            a, b = full[serial][field], partial[serial][field]
            assert b == pytest.approx(a) if isinstance(a, float) else a == b, (serial, field)
    assert sorted(r["rank"] for r in partial.values()) == list(range(1, 42))


def test_stored_priors_come_back_as_numbers(demo_db):
    with demo_db.sessions() as session:
        priors = stored_priors(session)
    assert priors is not None and len(priors) == 7
    assert priors["beta"].dtype == float  # kinds without a fit hold NaN, not None


def test_a_status_change_is_recorded_with_its_new_reason(demo_db):
    now = dt.datetime(2026, 12, 1, 12)
    with demo_db.sessions.begin() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == "EY-101"))
        before = session.get(AnalysisResult, pump.id).status
        assert before != "past_limit"
        session.execute(update(Pump).where(Pump.id == pump.id).values(eta_v_limit=0.99))
        refresh_analysis(session, pump_ids=[pump.id], now=now)
        change = session.scalars(select(StatusChange).where(StatusChange.pump_id == pump.id)
                                 .order_by(StatusChange.id.desc())).first()
    assert (change.previous_status, change.status) == (before, "past_limit")
    assert any("limit 99.0 %" in reason for reason in change.new_reasons)


def test_analysis_of_a_past_moment_uses_only_what_was_known(demo_db):
    moment = dt.datetime(2026, 6, 1)
    with demo_db.sessions.begin() as session:
        refresh_analysis(session, now=moment)
        records = analysis_records(session)
    assert max(r["last_reading_at"] for r in records if r["last_reading_at"]) <= "2026-06-01"


def test_samples_known_by_keeps_what_was_known_then():
    # Reference: the rule written out plainly, sample by sample (taken by then; its result blanked unless reported
    # by then), for the quick return (every sample taken and reported) and the ones that filter and blank.
    import numpy as np
    import pandas as pd

    from fleet.services.analysis.frames import samples_known_by

    moment = pd.Timestamp("2026-06-01 12:00")
    samples = pd.DataFrame({
        "machine_id": [1, 1, 2, 2, 3],
        "sampled_at": pd.to_datetime(["2026-05-01", "2026-05-20", "2026-05-30", "2026-06-02", None]).astype(
            "datetime64[us]"),
        "reported_at": pd.to_datetime(["2026-05-03 00:00", "2026-06-01 12:00", "2026-06-01 12:01", None, None]).astype(
            "datetime64[us]"),
        "code_4": [18.0, 17.0, 19.0, 20.0, 21.0], "code_6": [16.0, 15.0, 17.0, 18.0, 19.0],
        "code_14": [13.0, 12.0, 14.0, 15.0, 16.0], "low_count": [False, True, True, False, False],
        "water_ppm": [100.0, 120.0, 130.0, 140.0, 150.0], "viscosity_40": [46.0, 46.1, 46.2, 46.3, 46.4],
    })
    for rows in ([0, 1], [0, 1, 2], [0, 1, 2, 3, 4], []):
        given = samples.iloc[rows].reset_index(drop=True)
        expected = []
        for record in given.to_dict("records"):
            if pd.isna(record["sampled_at"]) or record["sampled_at"] > moment:
                continue
            if pd.isna(record["reported_at"]) or record["reported_at"] > moment:
                record.update(dict.fromkeys(("reported_at", "code_4", "code_6", "code_14", "water_ppm",
                                             "viscosity_40"), np.nan), low_count=False)
            expected.append(record)
        known = samples_known_by(given, moment).reset_index(drop=True)
        assert known.astype(object).where(known.notna(), None).to_dict("records") == pd.DataFrame(
            expected, columns=given.columns).astype(object).where(lambda f: f.notna(), None).to_dict("records"), rows


def _samples_known_by_pandas(samples, moment):
    """The reference: the pandas steps samples_known_by took before it built its columns from arrays (mask rows,
    then blank the pending results with .loc)."""
    import numpy as np

    samples = samples[samples["sampled_at"] <= moment]
    pending = samples["reported_at"].isna() | (samples["reported_at"] > moment)
    if not pending.any():
        return samples
    samples = samples.copy()
    samples.loc[pending, ["reported_at", "code_4", "code_6", "code_14", "water_ppm", "viscosity_40"]] = np.nan
    samples.loc[pending, "low_count"] = False
    return samples


def test_samples_known_by_equals_the_pandas_steps_on_the_demo_samples(demo_db):
    # Reference: _samples_known_by_pandas above (frames, dtypes and index equal to the bit), at moments across the
    # demo's sampling history, for all machines and for each machine alone (the one-pump path's case).
    import pandas as pd
    from pandas.testing import assert_frame_equal

    from fleet.services.analysis.frames import load_samples, samples_known_by

    with demo_db.sessions() as session:
        samples = load_samples(session)
        assert len(samples) > 10 and samples["reported_at"].notna().any()
        first, last = samples["sampled_at"].min(), samples["reported_at"].max()
        moments = [first - pd.Timedelta(days=1), *pd.date_range(first, last, periods=9),
                   last + pd.Timedelta(days=1)]
        blanked = 0
        for machine_id in [None, *sorted(samples["machine_id"].unique())]:
            given = samples if machine_id is None else load_samples(session, [int(machine_id)])
            for moment in moments:
                expected = _samples_known_by_pandas(given, moment)
                got = samples_known_by(given, moment)
                assert_frame_equal(got, expected, check_exact=True, obj=f"machine {machine_id} at {moment}")
                blanked += int((got["reported_at"].isna() & given.loc[got.index, "reported_at"].notna()).sum())
        assert blanked > 0  # the blanking branch ran


def _samples_by_pandas(session, machine_ids=None):
    """The reference: load_samples as it was before it built its columns from the driver's rows (SQLAlchemy's rows,
    pandas' own to_datetime and astype)."""
    import pandas as pd

    from fleet.db.models import OilSample
    from fleet.frames import SAMPLE_COLUMNS

    statement = select(OilSample.machine_id, OilSample.sampled_at, OilSample.reported_at, OilSample.code_4,
                       OilSample.code_6, OilSample.code_14, OilSample.low_count, OilSample.water_ppm,
                       OilSample.viscosity_40)
    if machine_ids is not None:
        statement = statement.where(OilSample.machine_id.in_([int(m) for m in machine_ids]))
    result = session.execute(statement)
    frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    for column in ("sampled_at", "reported_at"):
        frame[column] = pd.to_datetime(frame[column])
    frame = frame.astype({c: float for c in ("code_4", "code_6", "code_14", "water_ppm", "viscosity_40")})
    frame["low_count"] = frame["low_count"].astype(bool)
    return frame[list(SAMPLE_COLUMNS)]


def test_load_samples_equals_pandas_own_conversion(demo_db):
    # Reference: _samples_by_pandas above (frames and dtypes equal to the bit): the whole fleet, each machine
    # alone (the one-pump path), none, and a machine whose results are all still at the lab (empty times column).
    from pandas.testing import assert_frame_equal

    from fleet.db.models import OilSample
    from fleet.services.analysis.frames import load_samples

    with demo_db.sessions() as session:
        machines = sorted(set(session.scalars(select(OilSample.machine_id))))
        assert len(machines) > 1
        for machine_ids in (None, [], *([m] for m in machines), machines[:2]):
            assert_frame_equal(load_samples(session, machine_ids), _samples_by_pandas(session, machine_ids),
                               check_exact=True, obj=str(machine_ids))
        got = load_samples(session)
        assert got["reported_at"].isna().any()
    with demo_db.sessions() as session:  # results of one machine not reported yet (rolled back, never committed)
        session.query(OilSample).filter(OilSample.machine_id == machines[0]).update(
            {OilSample.reported_at: None, OilSample.code_4: None, OilSample.low_count: True})
        assert_frame_equal(load_samples(session, machines[:1]), _samples_by_pandas(session, machines[:1]),
                           check_exact=True)
        got = load_samples(session)
        assert_frame_equal(got, _samples_by_pandas(session), check_exact=True)
        assert got["code_4"].isna().any() and got["low_count"].any() and not got["low_count"].all()
        session.rollback()


def _readings_by_pandas(session, statement) -> pd.DataFrame:
    """The reference: the driver's rows through pandas' own inference (DataFrame.from_records), times parsed and
    numbers made floats after, as the loader did before it built each column at once."""
    keys, rows = driver_rows(session, statement)
    readings = pd.DataFrame.from_records(rows, columns=keys, coerce_float=True)
    readings["taken_at"] = pd.to_datetime(readings["taken_at"], format="ISO8601")
    return readings.astype({c: float for c in frames._READING_FLOATS})


def test_the_readings_columns_equal_pandas_own_conversion(demo_db):
    statement = select(Reading.id.label("reading_id"), Reading.pump_id, Reading.taken_at, Reading.hours,
                       Reading.pressure_bar, Reading.speed_rpm, Reading.flow_lpm, Reading.drain_lpm,
                       Reading.temp_c, Reading.stroke)
    with demo_db.sessions.begin() as session:
        # Blanks where the schema allows them (flow, drain, stroke), so NULL -> NaN is compared too.
        first = session.scalars(select(Reading.id).order_by(Reading.id).limit(3)).all()
        session.execute(update(Reading).where(Reading.id.in_(first)).values(flow_lpm=None, drain_lpm=None,
                                                                             stroke=None))
        for chosen in (statement, statement.where(Reading.pump_id.in_([1, 2])), statement.where(Reading.id < 0)):
            expected = _readings_by_pandas(session, chosen)
            got = frames._reading_columns(session, chosen)
            pd.testing.assert_frame_equal(got, expected, check_exact=True)
            assert len(got) > 0 or chosen is not statement
        assert frames._reading_columns(session, statement)["stroke"].isna().sum() >= 3
        session.rollback()


def _priors_by_frame(rows):
    """The reference: stored_priors' steps before it made number columns at once (a frame of the details, then
    each column that is not float made numbers where every value is one)."""
    frame = pd.DataFrame([{**detail} for _, detail in rows], index=pd.Index([kind for kind, _ in rows], name="kind"))
    for column in frame.columns:
        if frame[column].dtype == float:
            continue
        numbers = pd.to_numeric(frame[column], errors="coerce")
        if numbers.notna().sum() == frame[column].notna().sum():
            frame[column] = numbers.astype(float)
    return frame


def test_priors_frame_equals_the_frame_steps_it_replaced(demo_db):
    # Reference: _priors_by_frame above, to the bit and dtype, on the demo's stored figures and on details with
    # ints, missing fields, an all-None field, a note in text and a flag (those two take the frame steps).
    from pandas.testing import assert_frame_equal

    from fleet.db.models import FleetPrior
    from fleet.services.analysis.compute import priors_frame

    with demo_db.sessions() as session:
        stored = [tuple(row) for row in session.execute(select(FleetPrior.kind, FleetPrior.detail))]
    made = [("a", {"beta": 1.5, "alpha": 4.0e4, "n_failures": 12, "note": None}),
            ("b", {"beta": None, "alpha": None, "n_failures": 0, "note": None, "exposure_moved_since_fit": 1e-7}),
            ("c", {"alpha": 3, "beta": 2})]
    for rows in (stored, made, made[1:], [*made, ("d", {"beta": 1.0, "note": "fewer than 5 failures"})],
                 [*made, ("e", {"beta": 1.0, "flag": True})], [("f", {})]):
        assert_frame_equal(priors_frame(rows), _priors_by_frame(rows), check_exact=True, obj=str(rows))
