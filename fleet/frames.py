"""Column contracts of the data frames that cross from storage into the pure computation core.

Storage (fleet.services) builds these frames from the database; the core (fleet.physics, fleet.trend)
reads them and never touches the database. All values are in canonical units; times are naive UTC
``datetime64[ns]``; a missing value is NaN / NaT / None.
"""

# One row per pump.
PUMP_COLUMNS = {
    "pump_id": "int, key",
    "pump": "str, the serial number or tag people use",
    "kind": "str, a key of fleet.kinds.PUMP_KINDS",
    "variable": "bool, variable displacement",
    "displacement_cc": "float, cm3/rev at full stroke",
    "rated_speed_rpm": "float",
    "rated_pressure_bar": "float",
    "max_flow_lpm": "float, given or derived as displacement_cc * rated_speed_rpm / 1000",
    "case_drain": "bool, the pump has an external case drain to measure",
    "reference_temp_c": "float, oil temperature that readings are referred to (default 50)",
    "site": "str or None, where it is installed now",
    "machine": "str or None",
    "position": "str or None",
    "machine_id": "int or NaN, current machine (its reservoir's oil samples apply)",
    # effective limits (pump override, else kind default)
    "eta_v_limit": "float, fraction",
    "drain_limit_pct": "float or NaN, % of max flow at reference",
    "oil_temp_max_c": "float",
    "oil_temp_min_c": "float",
    "cleanliness_target": "str or None, ISO 4406 code such as '18/16/13'",
    "reading_interval_days": "float",
    "planning_horizon_weeks": "float",
    # energy
    "tariff_per_kwh": "float, site currency per kWh",
    "motor_efficiency": "float, fraction",
    "currency": "str",
    "overhaul_cost": "float or NaN, expected cost of an overhaul (for payback)",
}

# One row per reading (one pump, one visit).
READING_COLUMNS = {
    "reading_id": "int, key",
    "pump_id": "int",
    "taken_at": "datetime64",
    "hours": "float, the pump's running hours (hour meter)",
    "pressure_bar": "float, outlet pressure (gauge)",
    "speed_rpm": "float, shaft speed",
    "flow_lpm": "float or NaN, outlet flow",
    "drain_lpm": "float or NaN, case drain flow",
    "temp_c": "float, oil temperature",
    "stroke": "float or NaN, displacement setting as a fraction of full stroke (NaN: not recorded)",
    "nu40": "float or NaN, oil viscosity at 40 degC, mm2/s, of the oil in the pump's machine then",
    "nu100": "float or NaN, at 100 degC",
    "density15": "float or NaN, kg/L at 15 degC",
}

# Extra pressure/flow points of a multi-point flow test, tied to their reading.
FLOW_POINT_COLUMNS = {
    "reading_id": "int",
    "pressure_bar": "float",
    "flow_lpm": "float",
}

# Maintenance events.
EVENT_COLUMNS = {
    "pump_id": "int",
    "date": "datetime64",
    "hours": "float or NaN, running hours at the event",
    "kind": "str, a key of fleet.kinds.EVENT_KINDS",
    "cost": "float or NaN",
}

# Oil samples, one per reservoir (machine) and sampling.
SAMPLE_COLUMNS = {
    "machine_id": "int",
    "sampled_at": "datetime64",
    "reported_at": "datetime64 or NaT (still at the lab)",
    "code_4": "float or NaN (microscope counts have no 4 µm channel)",
    "code_6": "float or NaN",
    "code_14": "float or NaN",
    "low_count": "bool, a channel counted fewer than 20 particles (code shown with '>=')",
    "water_ppm": "float or NaN",
    "viscosity_40": "float or NaN, mm2/s",
}
