"""One pump analysed alone gives the figures the whole-fleet run gives it: the engine is one implementation,
vectorised over one pump or many (fleet.trend.engine.analyze_fleet), so the single-pump path after a write and
the full analysis cannot drift apart. The reference is the project's own fleet run; the figures themselves are
checked against outside sources in the tests of fleet/trend (statsmodels, scipy, ISO 13381-1 wording)."""

import datetime as dt

from fleet.services.analysis.frames import load_frames
from fleet.trend.engine import analyze_fleet
from tests.frame_compare import same_column

NOW = dt.datetime(2026, 12, 1, 12)
SKIP = {"rank"}  # the fleet's service order: a pump alone is always first, by design


def test_each_pump_alone_gives_the_figures_of_the_whole_fleet_run(demo_db):
    with demo_db.sessions() as session:
        whole = load_frames(session, None, as_of=NOW)
        fleet = analyze_fleet(whole.pumps, whole.readings, whole.events, whole.samples, whole.flow_points, now=NOW)
        pump_ids = list(fleet.results.index)
        assert len(pump_ids) == 41
        past = 0
        for pump_id in pump_ids:
            own = load_frames(session, [pump_id], as_of=NOW)
            alone = analyze_fleet(own.pumps, own.readings, own.events, own.samples, own.flow_points, now=NOW,
                                  priors=fleet.priors)
            expected, got = fleet.results.loc[[pump_id]], alone.results.loc[[pump_id]]
            assert set(got.columns) == set(expected.columns)
            for column in expected.columns:
                if column not in SKIP:
                    same_column(expected[column], got[column], f"pump {pump_id} {column}")
            # Every interval's fit, not only the current one's.
            fits = fleet.fits[fleet.fits["pump_id"] == pump_id].reset_index(drop=True)
            own_fits = alone.fits.reset_index(drop=True)
            assert len(fits) == len(own_fits) > 0
            for column in fits.columns:
                same_column(fits[column], own_fits[column], f"pump {pump_id} fits {column}")
            past += bool(expected["crossed_limit"].notna().iloc[0])
    assert past > 0  # the demo has pumps past a limit, so the dating of a crossing is compared too


def test_the_one_pump_frames_are_the_fleet_loaders_for_every_pump(demo_db):
    # The analysis after a write loads its one pump by the pump page's queries (fleet.services.analysis.compute
    # .one_pump_frames); the reference is the whole-fleet loader, itself checked against the demo's rows.
    from pandas.testing import assert_frame_equal

    from fleet.services.analysis.compute import one_pump_frames

    with demo_db.sessions() as session:
        pump_ids = list(load_frames(session, None, as_of=NOW).pumps["pump_id"])
        assert len(pump_ids) == 41
        with_samples = 0
        for pump_id in pump_ids:
            fleet, own = load_frames(session, [pump_id], as_of=NOW), one_pump_frames(session, pump_id, NOW)
            for name in ("readings", "events", "flow_points", "samples"):
                expected, got = getattr(fleet, name), getattr(own, name)
                keys = [c for c in expected.columns if c not in ("cost", "hours", "code_4", "code_6", "code_14")]
                assert_frame_equal(got.sort_values(keys, kind="stable").reset_index(drop=True),
                                   expected.sort_values(keys, kind="stable").reset_index(drop=True),
                                   check_dtype=name != "flow_points", obj=f"pump {pump_id} {name}")
            assert_frame_equal(own.pumps[list(fleet.pumps.columns)].reset_index(drop=True), fleet.pumps,
                               check_dtype=False, obj=f"pump {pump_id} pumps")
            with_samples += len(own.samples) > 0
        assert with_samples > 0  # lab results are compared too
        assert one_pump_frames(session, max(pump_ids) + 1000, NOW) is None


def test_the_fits_framed_when_read_are_the_arrays_the_engine_worked_on(demo_db):
    # The engine keeps the fits as a narrow table and each quantity's LawFits, framing the members' ~1,300 columns
    # only when FleetAnalysis.fits is read; the kept interval trends read the columns by name without framing them.
    # The reference is the framed frame: both readings must give the same rows, value for value.
    import numpy as np

    from fleet.trend.interval_trends import interval_trends
    from fleet.trend.wear_laws import FIELDS, LawFits

    with demo_db.sessions() as session:
        whole = load_frames(session, None, as_of=NOW)
    fleet = analyze_fleet(whole.pumps, whole.readings, whole.events, whole.samples, whole.flow_points, now=NOW)
    assert list(fleet.fit_columns()) == list(fleet.fits.columns)
    for q, laws in fleet.laws.items():
        again = LawFits.from_columns(fleet.fits, q)
        for name in (*FIELDS, "hours_scale", "hours_offset"):
            np.testing.assert_array_equal(getattr(again, name), getattr(laws, name), err_msg=f"{q} {name}")
    framed = interval_trends(fleet.fits, fleet.intervals, 0.9)
    by_name = interval_trends(fleet.fit_columns(), fleet.intervals, 0.9)
    assert len(framed) == len(fleet.fits) > 41  # some pumps have more than one interval
    assert list(by_name.columns) == list(framed.columns)
    for column in framed.columns:
        if column == "fit":  # JSON-ready dicts: equal key for key, in the same order
            assert [list(d.items()) for d in by_name[column]] == [list(d.items()) for d in framed[column]]
        else:
            same_column(framed[column], by_name[column], f"kept trends {column}")
