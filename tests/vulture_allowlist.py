"""Names vulture cannot see used, each with the reason it stays (tests/test_dead_code.py reads this file).

Views, click commands and login hooks are called by their frameworks (vulture is told their decorators)."""

# ruff: noqa: F821, B018  (bare names for vulture, never run)
acting_as  # the audit trail's actor for scripts; the tests and the command line use it
isolation_level  # set on the sqlite3 connection: SQLAlchemy, not the driver, begins transactions
interval_no  # a column of the service_life table
# Pump and oil formulas checked against handbook worked examples (tests/test_physics_*.py); they are the physics
# layer's vocabulary, kept beside the formulas the analysis uses.
steps_over
slot_leakage_lpm
temperature_for_viscosity_c
iso_vg_limits
volumetric_efficiency
input_torque_nm
shaft_power_kw
overall_efficiency
gear_displacement_cc
n_failures  # fields of WeibullFit, read by the tests
n_suspensions
# Flask-Login and Flask read these attributes of the objects they are given
is_active
is_anonymous
get_id
audit_token
required_role  # read by tests/test_security_write_routes.py to check every write route names its role
permanent
get_cookie_secure
session_interface
status_code
temp_offset_c  # read by name: seed_demo.measurements.machine_column(visits["machine"], "temp_offset_c")
grouped_wls  # the closed-form weighted line per group, checked against statsmodels (tests/test_trend_linear.py);
fieller_crossing  # the wear-law tests take both as the reference of the exponential law's fit and crossing
freeze_panes  # openpyxl reads these attributes of a sheet and a cell when it saves the workbook
number_format
hint  # a rounds form field's line under it, read by templates/rounds/walk.html
value_cdf  # the averaged trend's distribution at given hours: the crossing searches' tests hold them to it
# The crossing searches' one-case forms, which the tests use as the references crossing_bands is held to.
crossing_quantiles  # tests/test_model_average_steps.py builds the per-law reference from it
crossing_band  # one case of crossing_bands; tests/test_trend_wear_shared_shape.py reads a band through it
