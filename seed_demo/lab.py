"""Oil samples of the demo machines: every 6-8 weeks per reservoir, reported by the lab 5-15 days later."""

import datetime as dt

import numpy as np
import pandas as pd

from fleet.limits import DEFAULT_LIMITS, VARIABLE_PISTON_TARGET
from fleet.physics.cleanliness import count_range
from seed_demo.layout import DIRTY_MACHINE, LAB_PENDING_DAYS, LAB_PENDING_MACHINE, MACHINES

COUNT_REPORT_SHARE = 0.2  # some lab reports give particle counts per mL instead of the code
SAMPLE_STEP_DAYS = (42, 57)
REPORT_DELAY_DAYS = (5, 16)  # integers drawn in [5, 16): 5 to 15 days


def machine_targets(specs: pd.DataFrame) -> dict[str, np.ndarray]:
    """Cleanliness target per machine: the cleanest default target of the pumps it carries (fleet.limits)."""
    target = specs["kind"].map({k: v.cleanliness_target for k, v in DEFAULT_LIMITS.items()})
    target = target.where(~(specs["variable"] & specs["kind"].str.endswith("piston")), VARIABLE_PISTON_TARGET)
    codes = target.str.split("/", expand=True).astype(int)
    cleanest = codes.groupby(specs["machine"]).min()
    return {name: row.to_numpy() for name, row in cleanest.iterrows()}


def counts_within_codes(rng: np.random.Generator, codes: np.ndarray) -> np.ndarray:
    """Particle counts per mL that fall inside the given ISO 4406 scale numbers (log-uniform in the band)."""
    lower, upper = (np.asarray(limit) for limit in count_range(codes))
    position = rng.uniform(0.05, 0.95, codes.shape)
    return np.round(lower * (upper / lower) ** position, 2)


def draw_samples(rng: np.random.Generator, specs: pd.DataFrame, first_day: dt.date, end: dt.date) -> pd.DataFrame:
    """One row per oil sample with the lab's answer; the pending machine's latest sample has no report yet."""
    targets = machine_targets(specs)
    span_days = (end - first_day).days
    frames = []
    for machine in MACHINES:
        latest_back = LAB_PENDING_DAYS if machine.name == LAB_PENDING_MACHINE else int(rng.integers(16, 46))
        back = latest_back + np.concatenate([[0], np.cumsum(rng.integers(*SAMPLE_STEP_DAYS, size=40))])
        back = back[back <= span_days]
        k = len(back)
        # Cleaner than target by 0-2 codes on every channel, sometimes one more on a single channel.
        shift = rng.integers(0, 3, k)[:, None] + (rng.random((k, 3)) < 0.2)
        codes = targets[machine.name][None, :] - shift
        if machine.name == DIRTY_MACHINE:
            codes[0] = targets[machine.name] + 3  # the latest sample: dirty, above target on every channel
            before_filter = np.flatnonzero(back > 400)[:1]
            codes[before_filter] = targets[machine.name] + 2  # the sample that led to the filter change
        delay = rng.integers(*REPORT_DELAY_DAYS, size=k).astype(float)
        if machine.name == LAB_PENDING_MACHINE:
            delay[0] = np.nan
        as_counts = rng.random(k) < COUNT_REPORT_SHARE
        as_counts[0] &= machine.name not in (DIRTY_MACHINE, LAB_PENDING_MACHINE)
        sampled = pd.Timestamp(end) - pd.to_timedelta(back, unit="D")
        frames.append(
            pd.DataFrame(
                {
                    "site": machine.site,
                    "machine": machine.name,
                    "sampled_at": sampled,
                    "reported_at": sampled + pd.to_timedelta(delay, unit="D"),
                    "code_4": codes[:, 0],
                    "code_6": codes[:, 1],
                    "code_14": codes[:, 2],
                    "as_counts": as_counts,
                    **dict(zip(("count_4", "count_6", "count_14"), counts_within_codes(rng, codes).T, strict=True)),
                    "water_ppm": np.round(rng.lognormal(np.log(120.0), 0.4, k)),
                    "viscosity_40_cst": np.round(machine.oil.nu40_cst * (1.0 + rng.normal(0.0, 0.02, k)), 1),
                }
            )
        )
    samples = pd.concat(frames, ignore_index=True).sort_values(["sampled_at", "machine"], ignore_index=True)
    year = samples["sampled_at"].dt.year
    number_in_year = (samples.groupby(year).cumcount() + 1).astype(str).str.zfill(3)
    samples["lab_ref"] = "lab-" + year.astype(str) + "-" + number_in_year
    return samples
