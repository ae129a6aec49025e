"""Typed SQLAlchemy models: the asset register, readings, oil samples, maintenance and stored analysis.

Values are stored in canonical units (bar, L/min, rpm, degC, h, cm3/rev, mm2/s, kg/L); times are naive UTC.
Float columns name their type explicitly: SQLAlchemy 2.1 would map ``Mapped[float]`` to Double, which Alembic
then reports as a change against the migrations.
"""

from datetime import datetime
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import Mapped, mapped_column, relationship

from fleet.db.base import Base
from fleet.physics.pump import theoretical_flow_lpm
from fleet.timeutil import utcnow


class Site(Base):
    __tablename__ = "site"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(120), unique=True)
    currency: Mapped[str] = mapped_column(String(8), default="EUR")
    tariff_per_kwh: Mapped[float] = mapped_column(Float, default=0.15)
    motor_efficiency: Mapped[float] = mapped_column(Float, default=0.93)
    note: Mapped[str | None] = mapped_column(Text)
    # How the site's people write times and numbers (fleet.sitelocal): an IANA zone, display units as
    # fleet.units spells them, and whether a comma may be the decimal mark. Storage stays UTC and canonical.
    time_zone: Mapped[str] = mapped_column(String(64), default="UTC", server_default="UTC")
    pressure_unit: Mapped[str] = mapped_column(String(16), default="bar", server_default="bar")
    flow_unit: Mapped[str] = mapped_column(String(16), default="L/min", server_default="L/min")
    temperature_unit: Mapped[str] = mapped_column(String(16), default="degC", server_default="degC")
    decimal_comma: Mapped[bool] = mapped_column(Boolean, default=False, server_default="0")

    machines: Mapped[list["Machine"]] = relationship(back_populates="site", order_by="Machine.name")


class Oil(Base):
    """An oil as filled in a reservoir, with the two data-sheet viscosities that place its curve (ASTM D341)."""

    __tablename__ = "oil"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(120), unique=True)
    iso_vg: Mapped[int | None] = mapped_column(Integer)
    viscosity_40: Mapped[float] = mapped_column(Float)
    viscosity_100: Mapped[float] = mapped_column(Float)
    density_15: Mapped[float] = mapped_column(Float, default=0.87)


class Machine(Base):
    """A hydraulic power unit or machine: one reservoir, one oil, several pump positions."""

    __tablename__ = "machine"
    __table_args__ = (UniqueConstraint("site_id", "name"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    site_id: Mapped[int] = mapped_column(ForeignKey("site.id"), index=True)
    name: Mapped[str] = mapped_column(String(120))
    oil_id: Mapped[int | None] = mapped_column(ForeignKey("oil.id"))
    note: Mapped[str | None] = mapped_column(Text)

    site: Mapped[Site] = relationship(back_populates="machines")
    oil: Mapped[Oil | None] = relationship()
    positions: Mapped[list["Position"]] = relationship(back_populates="machine", order_by="Position.name")


class Position(Base):
    """A place on a machine where a pump sits; it keeps the list of pumps it has had."""

    __tablename__ = "position"
    __table_args__ = (UniqueConstraint("machine_id", "name"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    machine_id: Mapped[int] = mapped_column(ForeignKey("machine.id"), index=True)
    name: Mapped[str] = mapped_column(String(120))

    machine: Mapped[Machine] = relationship(back_populates="positions")


class Pump(Base):
    """The serial-numbered unit that can move between positions; its history follows its serial."""

    __tablename__ = "pump"

    id: Mapped[int] = mapped_column(primary_key=True)
    serial: Mapped[str] = mapped_column(String(120), unique=True)
    kind: Mapped[str] = mapped_column(String(32))
    variable: Mapped[bool] = mapped_column(Boolean, default=False)
    displacement_cc: Mapped[float] = mapped_column(Float)
    rated_speed_rpm: Mapped[float] = mapped_column(Float)
    rated_pressure_bar: Mapped[float] = mapped_column(Float)
    max_flow_lpm: Mapped[float | None] = mapped_column(Float)
    case_drain: Mapped[bool] = mapped_column(Boolean, default=False)
    reference_temp_c: Mapped[float] = mapped_column(Float, default=50.0)
    # Per-pump overrides of the kind's default limits; NULL means "use the kind default".
    eta_v_limit: Mapped[float | None] = mapped_column(Float)
    drain_limit_pct: Mapped[float | None] = mapped_column(Float)
    oil_temp_max_c: Mapped[float | None] = mapped_column(Float)
    oil_temp_min_c: Mapped[float | None] = mapped_column(Float)
    cleanliness_target: Mapped[str | None] = mapped_column(String(16))
    reading_interval_days: Mapped[int | None] = mapped_column(Integer)
    planning_horizon_weeks: Mapped[int | None] = mapped_column(Integer)
    overhaul_cost: Mapped[float | None] = mapped_column(Float)
    note: Mapped[str | None] = mapped_column(Text)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)

    installations: Mapped[list["Installation"]] = relationship(
        back_populates="pump", order_by="Installation.installed_at"
    )

    @property
    def max_flow(self) -> float:
        """Given maximum flow, else derived from displacement and rated speed."""
        if self.max_flow_lpm is not None:
            return self.max_flow_lpm
        return theoretical_flow_lpm(self.displacement_cc, self.rated_speed_rpm)


class Installation(Base):
    """Which pump sat in which position from when to when, with the pump's hour meter at each end."""

    __tablename__ = "installation"

    id: Mapped[int] = mapped_column(primary_key=True)
    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id"), index=True)
    position_id: Mapped[int] = mapped_column(ForeignKey("position.id"), index=True)
    installed_at: Mapped[datetime] = mapped_column(DateTime)
    installed_hours: Mapped[float | None] = mapped_column(Float)
    removed_at: Mapped[datetime | None] = mapped_column(DateTime)
    removed_hours: Mapped[float | None] = mapped_column(Float)

    pump: Mapped[Pump] = relationship(back_populates="installations")
    position: Mapped[Position] = relationship()


class Reading(Base):
    """One pump, one visit."""

    __tablename__ = "reading"
    __table_args__ = (UniqueConstraint("pump_id", "taken_at"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id"), index=True)
    taken_at: Mapped[datetime] = mapped_column(DateTime)
    hours: Mapped[float] = mapped_column(Float)
    pressure_bar: Mapped[float] = mapped_column(Float)
    speed_rpm: Mapped[float] = mapped_column(Float)
    flow_lpm: Mapped[float | None] = mapped_column(Float)
    drain_lpm: Mapped[float | None] = mapped_column(Float)
    temp_c: Mapped[float] = mapped_column(Float)
    stroke: Mapped[float | None] = mapped_column(Float)  # fraction of full displacement; NULL = not recorded
    taken_by: Mapped[str | None] = mapped_column(String(120))
    note: Mapped[str | None] = mapped_column(Text)
    source: Mapped[str] = mapped_column(String(16), default="form")
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    # The id a device gave the reading before sending it (POST /api/readings): a resend finds it, never a twin.
    # A unique index, not a constraint: SQLite adds it without copying the table (a copy would cascade-delete the
    # flow test points that refer to each reading).
    client_id: Mapped[str | None] = mapped_column(String(64), unique=True, index=True)

    flow_points: Mapped[list["FlowTestPoint"]] = relationship(
        back_populates="reading", cascade="all, delete-orphan", order_by="FlowTestPoint.pressure_bar"
    )


class FlowTestPoint(Base):
    """An extra pressure/flow point of a multi-point flow test taken on the same visit as its reading."""

    __tablename__ = "flow_test_point"

    id: Mapped[int] = mapped_column(primary_key=True)
    reading_id: Mapped[int] = mapped_column(ForeignKey("reading.id", ondelete="CASCADE"), index=True)
    pressure_bar: Mapped[float] = mapped_column(Float)
    flow_lpm: Mapped[float] = mapped_column(Float)

    reading: Mapped[Reading] = relationship(back_populates="flow_points")


class OilSample(Base):
    """A lab result for a machine's reservoir: sampled on one day, reported days later."""

    __tablename__ = "oil_sample"
    __table_args__ = (UniqueConstraint("machine_id", "sampled_at"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    machine_id: Mapped[int] = mapped_column(ForeignKey("machine.id"), index=True)
    sampled_at: Mapped[datetime] = mapped_column(DateTime)
    reported_at: Mapped[datetime | None] = mapped_column(DateTime)
    code_4: Mapped[int | None] = mapped_column(Integer)
    code_6: Mapped[int | None] = mapped_column(Integer)
    code_14: Mapped[int | None] = mapped_column(Integer)
    count_4: Mapped[float | None] = mapped_column(Float)  # particles per mL, when the lab gave counts
    count_6: Mapped[float | None] = mapped_column(Float)
    count_14: Mapped[float | None] = mapped_column(Float)
    low_count: Mapped[bool] = mapped_column(Boolean, default=False)
    water_ppm: Mapped[float | None] = mapped_column(Float)
    viscosity_40: Mapped[float | None] = mapped_column(Float)
    lab_ref: Mapped[str | None] = mapped_column(String(120))
    note: Mapped[str | None] = mapped_column(Text)


class MaintenanceEvent(Base):
    """Work done on a pump. An overhaul or replacement starts a new service interval."""

    __tablename__ = "maintenance_event"

    id: Mapped[int] = mapped_column(primary_key=True)
    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id"), index=True)
    date: Mapped[datetime] = mapped_column(DateTime)
    hours: Mapped[float | None] = mapped_column(Float)
    kind: Mapped[str] = mapped_column(String(32))
    cost: Mapped[float | None] = mapped_column(Float)
    downtime_h: Mapped[float | None] = mapped_column(Float)
    failure_mode: Mapped[str | None] = mapped_column(String(32))
    note: Mapped[str | None] = mapped_column(Text)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)


class LimitDefault(Base):
    """Fleet default limits for one pump kind; pumps override any of them."""

    __tablename__ = "limit_default"

    kind: Mapped[str] = mapped_column(String(32), primary_key=True)
    eta_v_limit: Mapped[float] = mapped_column(Float)
    drain_limit_pct: Mapped[float | None] = mapped_column(Float)
    oil_temp_max_c: Mapped[float] = mapped_column(Float)
    oil_temp_min_c: Mapped[float] = mapped_column(Float)
    cleanliness_target: Mapped[str] = mapped_column(String(16))
    reading_interval_days: Mapped[int] = mapped_column(Integer)
    planning_horizon_weeks: Mapped[int] = mapped_column(Integer)
    source: Mapped[str] = mapped_column(Text)


class AnalysisResult(Base):
    """The latest analysis of one pump, stored so pages read it instead of recomputing."""

    __tablename__ = "analysis_result"

    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id", ondelete="CASCADE"), primary_key=True)
    computed_at: Mapped[datetime] = mapped_column(DateTime)
    status: Mapped[str] = mapped_column(String(16), index=True)
    reasons: Mapped[list[str]] = mapped_column(JSON)
    eta_v_ref: Mapped[float | None] = mapped_column(Float)
    eta_v_decline_per_1000h: Mapped[float | None] = mapped_column(Float)
    drain_pct_ref: Mapped[float | None] = mapped_column(Float)
    hours_to_limit: Mapped[float | None] = mapped_column(Float)
    hours_to_limit_low: Mapped[float | None] = mapped_column(Float)
    hours_to_limit_high: Mapped[float | None] = mapped_column(Float)
    limit_date: Mapped[str | None] = mapped_column(String(10))
    governing_limit: Mapped[str | None] = mapped_column(String(16))
    energy_cost_per_year: Mapped[float | None] = mapped_column(Float)
    detail: Mapped[dict[str, Any]] = mapped_column(JSON)  # every other figure of the analysis, JSON-ready
    # The two figures of the service order besides status and hours (also in detail): columns, so re-ranking the
    # stored list after a write reads no JSON.
    past_margin: Mapped[float | None] = mapped_column(Float)
    limit_date_low: Mapped[str | None] = mapped_column(String(10))
    # What the pump's prior figures (its kind's fleet life figures at its age, fleet.trend.engine.prior_figures)
    # are computed from, as plain columns: the figures themselves are computed when read
    # (fleet.services.analysis.read_figures), so a refit of the kind rewrites no pump's row.
    age_hours: Mapped[float | None] = mapped_column(Float)
    planning_horizon_hours: Mapped[float | None] = mapped_column(Float)
    # The pump's place in the service order as bytes (fleet.trend.status.service_order_keys), indexed. The rank
    # shown is derived when read (1 + the number of smaller keys), so a store writes its own pumps' keys only.
    # NULL only on rows stored before the column existed, until the next store keys them all.
    order_key: Mapped[bytes | None] = mapped_column(LargeBinary, index=True)
    # The pump's data version (PumpDataVersion) these figures were computed from: older than the pump's means stale.
    # Indexed: the check before every page sums it (fleet.services.analysis.refresh.any_stale).
    data_version: Mapped[int] = mapped_column(Integer, default=0, server_default="0", index=True)


class PumpDataVersion(Base):
    """A counter per pump that every write of what its analysis reads moves on, in the same transaction.

    A stored analysis carries the version it was computed from, so a stale one is always known (never silently
    stale), and a slow analysis never overwrites one computed from newer data.
    """

    __tablename__ = "pump_data_version"

    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id", ondelete="CASCADE"), primary_key=True)
    version: Mapped[int] = mapped_column(Integer, default=0)


class ServiceLife(Base):
    """Running hours each service interval of a pump lived (from its latest analysis): the fleet life figures of
    a pump kind are refitted from these rows alone, without loading readings."""

    __tablename__ = "service_life"

    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id", ondelete="CASCADE"), primary_key=True)
    interval_no: Mapped[int] = mapped_column(Integer, primary_key=True)
    entry_hours: Mapped[float] = mapped_column(Float)
    life_hours: Mapped[float] = mapped_column(Float)
    failed: Mapped[bool] = mapped_column(Boolean)


class IntervalTrend(Base):
    """Each service interval's wear trend as the latest analysis fitted it (every wear law's line of the referred
    slip, its crossing of the limit with bounds): the pump page draws the trend and its band from these rows, so
    viewing a pump runs no analysis. Replaced with the pump's analysis_result, in the same transaction."""

    __tablename__ = "interval_trend"

    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id", ondelete="CASCADE"), primary_key=True)
    interval_no: Mapped[int] = mapped_column(Integer, primary_key=True)
    computed_at: Mapped[datetime] = mapped_column(DateTime)
    is_current: Mapped[bool] = mapped_column(Boolean)
    start_hours: Mapped[float | None] = mapped_column(Float)  # hour meter at the interval's start
    current_hours: Mapped[float | None] = mapped_column(Float)  # hours into the interval at its last reading
    enough_data: Mapped[bool] = mapped_column(Boolean)  # the slip has a trend of its own
    fit: Mapped[dict[str, Any]] = mapped_column(JSON)  # the fitted figures, JSON-ready (fleet.trend.interval_trends)


class ForecastSnapshot(Base):
    """What the analysis forecast for one pump at one moment: the raw material of the forecast record.

    Written by the analysis store (fleet.services.analysis.snapshots) only when the pump's forecast moved since
    its latest snapshot; a forecast that moves again on the same (UTC) day replaces that day's row, so a pump has
    at most one a day. A forecast stands until the next snapshot says otherwise. For a pump past its limit the
    dates are when its trend crossed the limit, with bounds.
    """

    __tablename__ = "forecast_snapshot"
    __table_args__ = (Index("ix_forecast_snapshot_pump_made", "pump_id", "made_at"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id", ondelete="CASCADE"))
    made_at: Mapped[datetime] = mapped_column(DateTime)
    interval_no: Mapped[int] = mapped_column(Integer)
    trend: Mapped[bool] = mapped_column(Boolean)  # False: too little data for a forecast at all
    past_limit: Mapped[bool] = mapped_column(Boolean)
    governing_limit: Mapped[str | None] = mapped_column(String(16))
    hours_to_limit: Mapped[float | None] = mapped_column(Float)
    hours_to_limit_low: Mapped[float | None] = mapped_column(Float)
    hours_to_limit_high: Mapped[float | None] = mapped_column(Float)
    limit_date: Mapped[str | None] = mapped_column(String(10))
    limit_date_low: Mapped[str | None] = mapped_column(String(10))
    limit_date_high: Mapped[str | None] = mapped_column(String(10))


class FleetPrior(Base):
    """Weibull fit of running hours between overhauls for one pump kind (the fleet's history)."""

    __tablename__ = "fleet_prior"

    kind: Mapped[str] = mapped_column(String(32), primary_key=True)
    computed_at: Mapped[datetime] = mapped_column(DateTime)
    detail: Mapped[dict[str, Any]] = mapped_column(JSON)


class Route(Base):
    """An ordered walk of pumps a technician reads on one round."""

    __tablename__ = "route"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(120), unique=True)
    note: Mapped[str | None] = mapped_column(Text)

    stops: Mapped[list["RouteStop"]] = relationship(
        back_populates="route", cascade="all, delete-orphan", order_by="RouteStop.seq"
    )


class RouteStop(Base):
    __tablename__ = "route_stop"
    __table_args__ = (UniqueConstraint("route_id", "pump_id"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    route_id: Mapped[int] = mapped_column(ForeignKey("route.id", ondelete="CASCADE"), index=True)
    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id"), index=True)
    seq: Mapped[int] = mapped_column(Integer)

    route: Mapped[Route] = relationship(back_populates="stops")
    pump: Mapped[Pump] = relationship()


class ShutdownWindow(Base):
    """A planned stop of a site or machine in which overhauls can be done."""

    __tablename__ = "shutdown_window"

    id: Mapped[int] = mapped_column(primary_key=True)
    site_id: Mapped[int | None] = mapped_column(ForeignKey("site.id"))
    machine_id: Mapped[int | None] = mapped_column(ForeignKey("machine.id"))
    starts_at: Mapped[datetime] = mapped_column(DateTime)
    ends_at: Mapped[datetime] = mapped_column(DateTime)
    note: Mapped[str | None] = mapped_column(Text)


class StatusChange(Base):
    """A change of a pump's status or reasons between two analyses: what the weekly review reports."""

    __tablename__ = "status_change"

    id: Mapped[int] = mapped_column(primary_key=True)
    pump_id: Mapped[int] = mapped_column(ForeignKey("pump.id", ondelete="CASCADE"), index=True)
    at: Mapped[datetime] = mapped_column(DateTime, index=True)
    status: Mapped[str] = mapped_column(String(16))
    previous_status: Mapped[str | None] = mapped_column(String(16))
    reasons: Mapped[list[str]] = mapped_column(JSON)
    new_reasons: Mapped[list[str]] = mapped_column(JSON)
    eta_v_ref: Mapped[float | None] = mapped_column(Float)
    hours_to_limit: Mapped[float | None] = mapped_column(Float)
    limit_date: Mapped[str | None] = mapped_column(String(10))


class User(Base):
    """Someone who signs in to the dashboard. Roles: viewer (read), technician (readings, lab results),
    engineer (everything a technician can, plus the register, limits and events)."""

    __tablename__ = "app_user"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(80), unique=True)
    role: Mapped[str] = mapped_column(String(16))
    password_hash: Mapped[str] = mapped_column(String(255))
    active: Mapped[bool] = mapped_column(Boolean, default=True)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    last_login_at: Mapped[datetime | None] = mapped_column(DateTime)
    email: Mapped[str | None] = mapped_column(String(254))  # where alerts and the weekly digest go; NULL: no mail
    digest: Mapped[bool] = mapped_column(Boolean, default=True, server_default="1")  # False: opted out of the digest


class ApiToken(Base):
    """A token for data loggers and handhelds posting readings; only its hash is stored."""

    __tablename__ = "api_token"

    id: Mapped[int] = mapped_column(primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("app_user.id", ondelete="CASCADE"), index=True)
    name: Mapped[str] = mapped_column(String(120))
    token_hash: Mapped[str] = mapped_column(String(128), unique=True)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    last_used_at: Mapped[datetime | None] = mapped_column(DateTime)
    revoked_at: Mapped[datetime | None] = mapped_column(DateTime)


class UserSession(Base):
    """One signed-in browser: its cookie carries the key, the database its hash. Ending the row (sign-out, a new
    password, a disabled user) ends the session on the server, whatever copy of the cookie exists."""

    __tablename__ = "user_session"

    id: Mapped[int] = mapped_column(primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("app_user.id", ondelete="CASCADE"), index=True)
    key_hash: Mapped[str] = mapped_column(String(64), unique=True)
    started_at: Mapped[datetime] = mapped_column(DateTime)
    ended_at: Mapped[datetime | None] = mapped_column(DateTime)


class AuditRecord(Base):
    """The previous values of a record that was edited or deleted, who did it and when; a deleted record
    can be restored from here."""

    __tablename__ = "audit_record"

    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[datetime] = mapped_column(DateTime, index=True)
    actor: Mapped[str] = mapped_column(String(120))
    action: Mapped[str] = mapped_column(String(16))  # update | delete | restore
    table_name: Mapped[str] = mapped_column(String(64), index=True)
    row_id: Mapped[int] = mapped_column(Integer, index=True)
    before: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    after: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    restored_at: Mapped[datetime | None] = mapped_column(DateTime)
    restored_by: Mapped[str | None] = mapped_column(String(120))
    reason: Mapped[str | None] = mapped_column(Text)  # why a correction was made (required of a reading's)


class Follow(Base):
    """Pumps a user follows: a site, a machine, or (both NULL) every pump. A followed pump that gets worse sends
    the user one alert."""

    __tablename__ = "follow"
    __table_args__ = (UniqueConstraint("user_id", "site_id", "machine_id"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("app_user.id", ondelete="CASCADE"), index=True)
    site_id: Mapped[int | None] = mapped_column(ForeignKey("site.id", ondelete="CASCADE"))
    machine_id: Mapped[int | None] = mapped_column(ForeignKey("machine.id", ondelete="CASCADE"))


class OutboxMail(Base):
    """One mail to one address: queued in the transaction that decided it (an alert with the analysis it follows
    from, a digest with its command), sent after the commit, kept with its attempts and last error until sent."""

    __tablename__ = "outbox_mail"
    __table_args__ = (UniqueConstraint("status_change_id", "user_id"),)  # one alert per worsening per person

    id: Mapped[int] = mapped_column(primary_key=True)
    kind: Mapped[str] = mapped_column(String(16))  # alert | digest
    user_id: Mapped[int | None] = mapped_column(ForeignKey("app_user.id", ondelete="SET NULL"), index=True)
    to_address: Mapped[str] = mapped_column(String(254))
    subject: Mapped[str] = mapped_column(String(300))
    text_body: Mapped[str] = mapped_column(Text)
    html_body: Mapped[str] = mapped_column(Text)
    message_id: Mapped[str] = mapped_column(String(255))  # kept, so a retry carries the same Message-ID
    pump_id: Mapped[int | None] = mapped_column(ForeignKey("pump.id", ondelete="SET NULL"))
    status_change_id: Mapped[int | None] = mapped_column(ForeignKey("status_change.id", ondelete="SET NULL"))
    created_at: Mapped[datetime] = mapped_column(DateTime, index=True)
    next_attempt_at: Mapped[datetime] = mapped_column(DateTime)
    claim: Mapped[str | None] = mapped_column(String(32))  # the sender that took the mail, while it sends
    claimed_at: Mapped[datetime | None] = mapped_column(DateTime)
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    last_error: Mapped[str | None] = mapped_column(Text)
    sent_at: Mapped[datetime | None] = mapped_column(DateTime, index=True)
