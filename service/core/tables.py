"""Database tables (SQLAlchemy 2.0 typed declarative). The schema itself comes from migrations."""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    CheckConstraint,
    Date,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    UniqueConstraint,
    text,
)
from sqlalchemy.dialects.postgresql import JSONB
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

# JSON documents: JSONB on PostgreSQL, JSON text elsewhere.
JsonDoc = JSON().with_variant(JSONB(), "postgresql")


def utcnow() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


def as_utc(value: dt.datetime) -> dt.datetime:
    """SQLite hands back naive datetimes; every stored time is UTC."""
    return value if value.tzinfo else value.replace(tzinfo=dt.UTC)


def as_utc_or_none(value: dt.datetime | None) -> dt.datetime | None:
    return None if value is None else as_utc(value)


def to_utc(value: dt.datetime) -> dt.datetime:
    """The same moment in UTC, for comparing with stored times (SQLite compares the text
    and would misread another zone); a naive time is taken as UTC."""
    return value.astimezone(dt.UTC) if value.tzinfo else value.replace(tzinfo=dt.UTC)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)


class ProductRow(Base):
    __tablename__ = "products"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    sku: Mapped[str] = mapped_column(String(64), unique=True)
    name: Mapped[str] = mapped_column(String(200))
    family: Mapped[str | None] = mapped_column(String(64), index=True)
    currency: Mapped[str] = mapped_column(String(3))
    unit_cost: Mapped[float | None] = mapped_column(Float)
    current_price: Mapped[float | None] = mapped_column(Float)
    min_price: Mapped[float | None] = mapped_column(Float)
    max_price: Mapped[float | None] = mapped_column(Float)
    default_spec: Mapped[dict[str, Any] | None] = mapped_column(JsonDoc)
    # When the product's history last changed: an incremental refit skips products
    # whose latest fit is newer.
    history_changed_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(
        DateTime(timezone=True), default=utcnow, onupdate=utcnow
    )


class ObservationRow(Base):
    __tablename__ = "observations"
    __table_args__ = (UniqueConstraint("product_id", "period"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id", ondelete="CASCADE"))
    period: Mapped[dt.date] = mapped_column(Date)
    price: Mapped[float] = mapped_column(Float)
    units: Mapped[float] = mapped_column(Float)
    unit_cost: Mapped[float | None] = mapped_column(Float)
    in_stock: Mapped[bool | None] = mapped_column(Boolean)
    # Named numeric covariates as one JSON object: {"rival_price": 1.02, "promo": 0}.
    covariates: Mapped[dict[str, float] | None] = mapped_column(JsonDoc)


class ApiKeyRow(Base):
    __tablename__ = "api_keys"

    id: Mapped[str] = mapped_column(String(16), primary_key=True)
    name: Mapped[str] = mapped_column(String(100))
    scopes: Mapped[list[str]] = mapped_column(JsonDoc)
    secret_hash: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    last_used_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    revoked_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    # Signing out of the analyst view counts this up, which ends every view session
    # signed in with the key (a session cookie carries the count it was signed with).
    view_generation: Mapped[int] = mapped_column(Integer, default=0, server_default="0")


class FitRow(Base):
    __tablename__ = "fits"
    __table_args__ = (
        UniqueConstraint("product_id", "version"),
        # At most one active fit per product, whatever runs concurrently.
        Index(
            "uq_fits_one_active",
            "product_id",
            unique=True,
            sqlite_where=text("status = 'active'"),
            postgresql_where=text("status = 'active'"),
        ),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    product_id: Mapped[int] = mapped_column(
        ForeignKey("products.id", ondelete="CASCADE"), index=True
    )
    version: Mapped[int] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16))
    form: Mapped[str] = mapped_column(String(16))
    spec: Mapped[dict[str, Any]] = mapped_column(JsonDoc)
    result: Mapped[dict[str, Any]] = mapped_column(JsonDoc)
    gates: Mapped[dict[str, Any] | None] = mapped_column(JsonDoc)
    n_obs: Mapped[int] = mapped_column(Integer)
    # Copied out of `result` so gates and lists need not parse the whole record.
    holdout_wape: Mapped[float | None] = mapped_column(Float)
    own_price_estimate: Mapped[float | None] = mapped_column(Float)
    job_id: Mapped[int | None] = mapped_column(ForeignKey("jobs.id", ondelete="SET NULL"))
    window_start: Mapped[dt.date | None] = mapped_column(Date)
    window_end: Mapped[dt.date | None] = mapped_column(Date)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


RECOMMENDATION_STATES = ("proposed", "approved", "declined", "superseded")


class RecommendationRow(Base):
    """A stored recommendation and where it stands on the reviewed path: ``proposed``
    until a person or an approval policy approves it (``approved``) or a person declines
    it (``declined``), or a newer proposed one for the product takes its place
    (``superseded``). Only a proposed recommendation changes state."""

    __tablename__ = "recommendations"
    __table_args__ = (
        CheckConstraint(
            "state IN ('proposed', 'approved', 'declined', 'superseded')", name="state"
        ),
        Index("ix_recommendations_product_state", "product_id", "state"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    product_id: Mapped[int] = mapped_column(
        ForeignKey("products.id", ondelete="CASCADE"), index=True
    )
    fit_id: Mapped[int | None] = mapped_column(ForeignKey("fits.id", ondelete="SET NULL"))
    objective: Mapped[str] = mapped_column(String(16))
    request: Mapped[dict[str, Any]] = mapped_column(JsonDoc)
    result: Mapped[dict[str, Any]] = mapped_column(JsonDoc)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    state: Mapped[str] = mapped_column(String(16), default="proposed", server_default="proposed")
    decided_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    decided_by_key_id: Mapped[str | None] = mapped_column(String(16))
    policy_id: Mapped[int | None] = mapped_column(Integer)
    approved_price: Mapped[float | None] = mapped_column(Float)
    note: Mapped[str | None] = mapped_column(String(500))


class PriceEntryRow(Base):
    """The price record: one entry per live price, never updated. An entry is the
    product's live price from ``effective_from`` until the next entry's start (a
    correction is a new entry), so a product has at most one live price at any time.
    Recommendation, fit and policy ids are kept as plain numbers: the record outlives them."""

    __tablename__ = "price_entries"
    __table_args__ = (UniqueConstraint("product_id", "effective_from"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id", ondelete="CASCADE"))
    price: Mapped[float] = mapped_column(Float)
    effective_from: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True))
    set_by_key_id: Mapped[str | None] = mapped_column(String(16))
    policy_id: Mapped[int | None] = mapped_column(Integer)
    recommendation_id: Mapped[int | None] = mapped_column(Integer)
    fit_id: Mapped[int | None] = mapped_column(Integer)
    note: Mapped[str | None] = mapped_column(String(500))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class ApprovalPolicyRow(Base):
    """Limits within which stored recommendations are approved without a person:
    a product, a family or the whole catalogue; ended, never deleted."""

    __tablename__ = "approval_policies"
    __table_args__ = (
        CheckConstraint("applies_to IN ('product', 'family', 'catalogue')", name="applies_to"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(100))
    applies_to: Mapped[str] = mapped_column(String(16))
    target: Mapped[str | None] = mapped_column(String(64))
    max_change_pct: Mapped[float] = mapped_column(Float)
    min_margin_pct: Mapped[float | None] = mapped_column(Float)
    created_by_key_id: Mapped[str | None] = mapped_column(String(16))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    ended_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    ended_by_key_id: Mapped[str | None] = mapped_column(String(16))


class AuditEntryRow(Base):
    """The audit log: who (a key, or None for a policy or the system) did what, when.
    Append-only: nothing in the service updates or deletes an entry, and the database
    refuses updates (and on PostgreSQL deletions) by trigger."""

    __tablename__ = "audit_entries"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow, index=True)
    actor_key_id: Mapped[str | None] = mapped_column(String(16), index=True)
    action: Mapped[str] = mapped_column(String(64), index=True)
    subject: Mapped[str] = mapped_column(String(200), index=True)
    details: Mapped[dict[str, Any]] = mapped_column(JsonDoc)


class JurisdictionRuleRow(Base):
    """A jurisdiction's pricing rule as a person entered it, for a product, a family or
    the whole catalogue: applied by the optimiser and checked again at approval. Ended
    (``ended_at``), never deleted, so that what was in effect stays known."""

    __tablename__ = "jurisdiction_rules"
    __table_args__ = (
        CheckConstraint(
            "kind IN ('no_sale_below_cost', 'emergency_increase_cap', 'min_change_interval', "
            "'prior_price_cap')",
            name="kind",
        ),
        CheckConstraint("applies_to IN ('product', 'family', 'catalogue')", name="applies_to"),
        Index("ix_jurisdiction_rules_applies_to_target", "applies_to", "target"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(100))
    kind: Mapped[str] = mapped_column(String(32))
    applies_to: Mapped[str] = mapped_column(String(16))
    target: Mapped[str | None] = mapped_column(String(64))
    max_increase_pct: Mapped[float | None] = mapped_column(Float)
    window_days: Mapped[int | None] = mapped_column(Integer)
    min_interval_days: Mapped[int | None] = mapped_column(Integer)
    starts_on: Mapped[dt.date | None] = mapped_column(Date)
    ends_on: Mapped[dt.date | None] = mapped_column(Date)
    note: Mapped[str | None] = mapped_column(String(500))
    created_by_key_id: Mapped[str | None] = mapped_column(String(16))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    ended_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    ended_by_key_id: Mapped[str | None] = mapped_column(String(16))


class PriceTestRow(Base):
    """A stored price-test plan: its periods (first to last), the fit it came from and the
    plan as answered. Observations whose periods fall within a plan's are its test periods."""

    __tablename__ = "price_tests"
    __table_args__ = (
        CheckConstraint("last_period >= first_period", name="period_order"),
        Index("ix_price_tests_product_id_first_period", "product_id", "first_period"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id", ondelete="CASCADE"))
    fit_id: Mapped[int | None] = mapped_column(ForeignKey("fits.id", ondelete="SET NULL"))
    first_period: Mapped[dt.date] = mapped_column(Date)
    last_period: Mapped[dt.date] = mapped_column(Date)
    n_periods: Mapped[int] = mapped_column(Integer)
    plan: Mapped[dict[str, Any]] = mapped_column(JsonDoc)
    created_by_key_id: Mapped[str | None] = mapped_column(String(16))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class JobRow(Base):
    __tablename__ = "jobs"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    kind: Mapped[str] = mapped_column(String(16))
    scope: Mapped[Any] = mapped_column(JsonDoc)
    options: Mapped[dict[str, Any] | None] = mapped_column(JsonDoc)
    status: Mapped[str] = mapped_column(String(16))
    done: Mapped[int] = mapped_column(Integer, default=0)
    total: Mapped[int] = mapped_column(Integer, default=0)
    counts: Mapped[dict[str, int] | None] = mapped_column(JsonDoc)
    errors: Mapped[list[dict[str, Any]] | None] = mapped_column(JsonDoc)
    message: Mapped[str | None] = mapped_column(String(500))
    claimed_by: Mapped[str | None] = mapped_column(String(120))
    schedule_name: Mapped[str | None] = mapped_column(String(64))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    started_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    heartbeat_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))
    finished_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))


class JobPartitionRow(Base):
    """One partition of a job run on a cluster: a range of product ids, its state and its
    own progress. ``batches_done`` is written in the transaction of each batch, so a
    partition retried after its worker died resumes after the last committed batch."""

    __tablename__ = "job_partitions"
    __table_args__ = (UniqueConstraint("job_id", "number"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    job_id: Mapped[int] = mapped_column(ForeignKey("jobs.id", ondelete="CASCADE"))
    number: Mapped[int] = mapped_column(Integer)
    first_id: Mapped[int] = mapped_column(Integer)
    last_id: Mapped[int] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16))
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    batches_done: Mapped[int] = mapped_column(Integer, default=0)
    done: Mapped[int] = mapped_column(Integer, default=0)
    total: Mapped[int] = mapped_column(Integer, default=0)
    counts: Mapped[dict[str, int] | None] = mapped_column(JsonDoc)
    errors: Mapped[list[dict[str, Any]] | None] = mapped_column(JsonDoc)
    worker: Mapped[str | None] = mapped_column(String(120))
    message: Mapped[str | None] = mapped_column(String(500))
    updated_at: Mapped[dt.datetime | None] = mapped_column(DateTime(timezone=True))


class ScheduleRunRow(Base):
    """One row per (schedule, slot): the unique key makes each slot run exactly once,
    however many schedulers race for it."""

    __tablename__ = "schedule_runs"
    __table_args__ = (UniqueConstraint("schedule_name", "slot"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    schedule_name: Mapped[str] = mapped_column(
        ForeignKey("schedules.name", ondelete="CASCADE"), index=True
    )
    slot: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True))
    job_id: Mapped[int | None] = mapped_column(ForeignKey("jobs.id", ondelete="SET NULL"))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)


class ScheduleRow(Base):
    __tablename__ = "schedules"

    name: Mapped[str] = mapped_column(String(64), primary_key=True)
    cron: Mapped[str] = mapped_column(String(100))
    timezone: Mapped[str] = mapped_column(String(64))
    job: Mapped[dict[str, Any]] = mapped_column(JsonDoc)
    enabled: Mapped[bool] = mapped_column(Boolean, default=True)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(
        DateTime(timezone=True), default=utcnow, onupdate=utcnow
    )


ALL_TABLES = [t.name for t in Base.metadata.sorted_tables]
