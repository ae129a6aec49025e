"""A deterministic generator of an invented demo plant, as the tables a site would import.

Everything it makes is invented: two made-up sites ("East Yard", "River Shop"), eight machines and 41 pumps
with catalogue-like but made-up rated data, 2.5 years of reading rounds, flow tests, oil samples and
maintenance events. Readings come from the project's physics (Wilson slip at the working pressure and oil
viscosity, domain.md sec. 4) with wear growing the slip coefficient exponentially with running hours.

    tables = generate(seed=2026, end=datetime.date(2026, 6, 30))

The same seed and end give identical tables; `simulate` also returns the generator's truth (true slip
coefficient, true referred eta_v, noise-free flows) for tests and for checking the analysis against it.
"""

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

from seed_demo import tables
from seed_demo.hour_meters import HourMeters, draw_hour_meters
from seed_demo.lab import draw_samples
from seed_demo.layout import SWAP_DAYS_BEFORE_END, SWAP_PUMP
from seed_demo.maintenance import EVENT_TIME, draw_events, overhaul_days
from seed_demo.measurements import flowtest_points, pick_flowtest_visits, take_readings
from seed_demo.pump_specs import draw_pump_specs
from seed_demo.rounds import occupancy, schedule_visits
from seed_demo.wear import draw_wear

WINDOW_DAYS = 913  # 2.5 years of readings up to and including `end`


@dataclass(frozen=True)
class DemoPlant:
    """The import tables plus what the generator knows and a site would not (the truth behind the readings)."""

    tables: dict[str, pd.DataFrame]
    specs: pd.DataFrame  # per pump: first position, rated data, oil, true new eta_v, scenario role
    wear: pd.DataFrame  # per pump: slip coefficient when new, wear rate per hour, overhaul reset
    readings: pd.DataFrame  # per reading: measured values and their noise-free truth
    flowtest_points: pd.DataFrame
    samples: pd.DataFrame
    events: pd.DataFrame
    meters: HourMeters
    first_day: dt.date
    end: dt.date


def today_utc() -> dt.date:
    return dt.datetime.now(dt.UTC).date()


def simulate(seed: int = 2026, end: dt.date | None = None) -> DemoPlant:
    """Build the whole invented plant from one random generator, in a fixed order of draws."""
    end = today_utc() if end is None else end
    rng = np.random.default_rng(seed)
    first_day = end - dt.timedelta(days=WINDOW_DAYS - 1)
    swap_day = end - dt.timedelta(days=SWAP_DAYS_BEFORE_END)

    specs = draw_pump_specs(rng, end)
    meters = draw_hour_meters(rng, specs, first_day, end)
    pump_index = {p: i for i, p in enumerate(specs["pump"])}
    all_pumps = np.arange(len(specs))

    occ = occupancy(specs, first_day, end, swap_day)
    visits = schedule_visits(rng, occ, first_day, end)
    hours = meters.read(visits["pump_index"].to_numpy(), visits["taken_at"])

    overhaul_hours = np.full(len(specs), np.nan)
    for pump, day in overhaul_days(end).items():
        overhaul_hours[pump_index[pump]] = meters.read(np.array([pump_index[pump]]), [day + EVENT_TIME])[0]
    end_noon = pd.DatetimeIndex([pd.Timestamp(end) + EVENT_TIME] * len(specs))
    wear = draw_wear(rng, specs, meters.read(all_pumps, end_noon), overhaul_hours)

    readings = take_readings(rng, visits, specs, wear, hours, pick_flowtest_visits(visits), pd.Timestamp(end))
    points = flowtest_points(rng, readings, specs, wear)
    samples = draw_samples(rng, specs, first_day, end)
    events = draw_events(rng, specs, meters, end, swap_day)

    moved = occ[(occ["pump"] == SWAP_PUMP) & (occ["from_day"] == pd.Timestamp(swap_day))].iloc[0]
    swap = {
        "pump": SWAP_PUMP,
        "site": specs.loc[specs["machine"] == moved["machine"], "site"].iloc[0],
        "machine": moved["machine"],
        "position": moved["position"],
        "installed_at": swap_day,
        "hours": float(meters.read(np.array([pump_index[SWAP_PUMP]]), [pd.Timestamp(swap_day) + EVENT_TIME])[0]),
    }
    import_tables = {
        "sites": tables.sites_table(),
        "pumps": tables.pumps_table(specs),
        "installations": tables.installations_table(swap),
        "readings": tables.readings_table(readings),
        "flowtests": tables.flowtests_table(points),
        "samples": tables.samples_table(samples),
        "events": tables.events_table(events),
    }
    return DemoPlant(
        tables=import_tables,
        specs=specs,
        wear=wear,
        readings=readings,
        flowtest_points=points,
        samples=samples,
        events=events,
        meters=meters,
        first_day=first_day,
        end=end,
    )


def generate(seed: int = 2026, end: dt.date | None = None) -> dict[str, pd.DataFrame]:
    """The invented demo plant's import tables: sites, pumps, installations, readings, flowtests, samples, events.

    Pure and deterministic: the same seed and end give identical frames. `end` (default: today in UTC) is the
    date of the last reading round.
    """
    return simulate(seed, end).tables
