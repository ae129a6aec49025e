"""Fleet default limits per pump kind, with where each value comes from.

Every value is a starting point a site overrides per kind (limit_default table) or per pump.
"""

from dataclasses import dataclass

from fleet.kinds import PISTON_KINDS, PUMP_KINDS


@dataclass(frozen=True)
class KindLimits:
    eta_v_limit: float  # fraction; overhaul when the referred volumetric efficiency falls below
    drain_limit_pct: float | None  # case drain at reference, % of max flow; None where no drain exists
    oil_temp_max_c: float
    oil_temp_min_c: float
    cleanliness_target: str  # ISO 4406 code
    reading_interval_days: int
    planning_horizon_weeks: int
    source: str


_ETA_SOURCE = "eta_v limit: common practice, no source (about 10 points below new; 0.85 piston, 0.80 gear)"
_DRAIN_SOURCE = "case drain limit: common practice, no source (new 1-3 %, worn 5-10 % of max flow)"
_TEMP_SOURCE = "oil temperature: lubrication practice, keep bulk oil below about 80 degC"
_CLEAN_SOURCE = "cleanliness target: common practice, filter-industry guideline charts (differ by one code)"
_ROUTINE_SOURCE = "reading interval and planning horizon: common practice, no source"


def _limits(eta: float, drain: float | None, target: str) -> KindLimits:
    return KindLimits(
        eta_v_limit=eta,
        drain_limit_pct=drain,
        oil_temp_max_c=80.0,
        oil_temp_min_c=10.0,
        cleanliness_target=target,
        reading_interval_days=14,
        planning_horizon_weeks=12,
        source="; ".join([_ETA_SOURCE, _DRAIN_SOURCE, _TEMP_SOURCE, _CLEAN_SOURCE, _ROUTINE_SOURCE]),
    )


DEFAULT_LIMITS: dict[str, KindLimits] = {
    "external_gear": _limits(0.80, None, "19/17/14"),
    "internal_gear": _limits(0.80, None, "19/17/14"),
    "gerotor": _limits(0.80, None, "19/17/14"),
    "lobe": _limits(0.80, None, "19/17/14"),
    "vane": _limits(0.80, 6.0, "18/16/13"),
    "axial_piston": _limits(0.85, 6.0, "18/16/13"),
    "radial_piston": _limits(0.85, 6.0, "18/16/13"),
}
# Variable-displacement piston pumps want cleaner oil (one code cleaner), common practice.
VARIABLE_PISTON_TARGET = "17/15/12"

assert set(DEFAULT_LIMITS) == set(PUMP_KINDS)
assert PISTON_KINDS <= set(DEFAULT_LIMITS)
