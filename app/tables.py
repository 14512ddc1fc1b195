"""SQLAlchemy 2 typed table models: campaigns, shots, evaluations, flags, revisions,
tokens, audit trail, background jobs, detailed solver runs, alert targets and their deliveries.

Shot input columns are the dotted paths of MODEL.md section 1 with '.' replaced by
'_' (``driver.sigma_z_mm`` -> ``driver_sigma_z_mm``). Evaluation output columns are
exactly the output names of MODEL.md section 8. Every schema change needs an Alembic
revision in migrations/versions.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    TypeDecorator,
    UniqueConstraint,
    text,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


class Base(DeclarativeBase):
    pass


class UTCDateTime(TypeDecorator[datetime]):
    """Timezone-aware UTC datetimes on every backend.

    SQLite keeps no offset, so values are converted to UTC on the way in (naive
    values are refused) and marked UTC on the way out. Stored text sorts in time order.
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to a UTC column")
        value = value.astimezone(UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    @staticmethod
    def sqlite_text(value: datetime | None) -> str | None:
        """What binding a value writes on SQLite (SQLAlchemy's DATETIME text, always with
        microseconds), made by ``isoformat`` in C: the bulk inserts of a batch write 5,000."""
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to a UTC column")
        return value.astimezone(UTC).replace(tzinfo=None).isoformat(" ", "microseconds")

    def process_result_value(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=UTC)
        return value.astimezone(UTC)


def _utc_dt() -> UTCDateTime:
    return UTCDateTime()


class Campaign(Base):
    __tablename__ = "campaigns"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    slug: Mapped[str] = mapped_column(String(64), unique=True)
    name: Mapped[str] = mapped_column(String(200))
    timezone: Mapped[str] = mapped_column(String(64), default="UTC")
    description: Mapped[str] = mapped_column(Text, default="")
    # Overrides of model.DEFAULT_SETTINGS (limits and model settings).
    model_settings: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    # Bumped on every settings change; evaluations record the version they used.
    settings_version: Mapped[int] = mapped_column(Integer, default=1)
    created_at: Mapped[datetime] = mapped_column(_utc_dt())

    shots: Mapped[list[Shot]] = relationship(back_populates="campaign")


class Shot(Base):
    """The current revision of a shot; older revisions live in shot_revisions."""

    __tablename__ = "shots"
    __table_args__ = (
        UniqueConstraint("campaign_id", "shot_id", name="uq_shots_campaign_shot_id"),
        Index("ix_shots_campaign_taken_at", "campaign_id", "taken_at", "id"),
        # Excluded shots are few: this partial index finds them without reading the others.
        Index(
            "ix_shots_excluded",
            "campaign_id",
            "id",
            sqlite_where=text("excluded_at IS NOT NULL"),
            postgresql_where=text("excluded_at IS NOT NULL"),
        ),
        Index("ix_shots_campaign_id_id", "campaign_id", "id"),  # the latest shot: one seek
    )

    id: Mapped[int] = mapped_column(BigInteger().with_variant(Integer, "sqlite"), primary_key=True)
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaigns.id", ondelete="CASCADE"))
    shot_id: Mapped[str] = mapped_column(String(128))
    taken_at: Mapped[datetime] = mapped_column(_utc_dt())
    revision: Mapped[int] = mapped_column(Integer, default=1)
    notes: Mapped[str] = mapped_column(Text, default="")
    tags: Mapped[list[str]] = mapped_column(JSON, default=list)
    # The posted body, verbatim, unknown fields included.
    raw_payload: Mapped[dict[str, Any]] = mapped_column(JSON)
    # sha256 of the canonical JSON of raw_payload: idempotent replay check.
    payload_sha256: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[datetime] = mapped_column(_utc_dt())
    updated_at: Mapped[datetime] = mapped_column(_utc_dt())
    # Set while the shot is excluded (a test or junk shot): kept and shown, left out of every
    # count, chart and summary (app.store.exclusions). Not a revision of the conditions.
    excluded_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    excluded_reason: Mapped[str | None] = mapped_column(Text)
    excluded_by: Mapped[str | None] = mapped_column(String(200))

    driver_species: Mapped[str] = mapped_column(String(16))
    driver_mass_amu: Mapped[float | None] = mapped_column(Float)
    driver_charge_state: Mapped[int | None] = mapped_column(Integer)
    driver_momentum_gev: Mapped[float] = mapped_column(Float)
    driver_population: Mapped[float] = mapped_column(Float)
    driver_sigma_z_mm: Mapped[float] = mapped_column(Float)
    driver_sigma_r_mm: Mapped[float] = mapped_column(Float)
    driver_emittance_n_mm_mrad: Mapped[float] = mapped_column(Float, default=0.0)
    driver_offset_x_mm: Mapped[float] = mapped_column(Float, default=0.0)
    driver_offset_y_mm: Mapped[float] = mapped_column(Float, default=0.0)
    driver_angle_x_mrad: Mapped[float] = mapped_column(Float, default=0.0)
    driver_angle_y_mrad: Mapped[float] = mapped_column(Float, default=0.0)
    plasma_density_cm3: Mapped[float] = mapped_column(Float)
    plasma_gradient_pct_per_m: Mapped[float] = mapped_column(Float, default=0.0)
    plasma_length_m: Mapped[float] = mapped_column(Float)
    plasma_ion_mass_amu: Mapped[float] = mapped_column(Float)
    plasma_ion_charge: Mapped[float] = mapped_column(Float, default=1.0)
    seed_method: Mapped[str] = mapped_column(String(32), default="none")
    seed_position_mm: Mapped[float | None] = mapped_column(Float)
    seed_electron_charge_pc: Mapped[float | None] = mapped_column(Float)
    seed_electron_sigma_z_mm: Mapped[float | None] = mapped_column(Float)
    seed_electron_sigma_r_mm: Mapped[float | None] = mapped_column(Float)
    measured_modulation_freq_ghz: Mapped[float | None] = mapped_column(Float)
    measured_microbunch_count: Mapped[float | None] = mapped_column(Float)
    measured_modulation_phase_rad: Mapped[float | None] = mapped_column(Float)
    measured_halo_radius_mm: Mapped[float | None] = mapped_column(Float)
    measured_witness_energy_mev: Mapped[float | None] = mapped_column(Float)

    campaign: Mapped[Campaign] = relationship(back_populates="shots")
    evaluation: Mapped[Evaluation | None] = relationship(
        back_populates="shot", uselist=False, cascade="all, delete-orphan"
    )


class ShotRevision(Base):
    """Every revision of every shot, first one included; rows are never updated."""

    __tablename__ = "shot_revisions"
    __table_args__ = (UniqueConstraint("shot_pk", "revision", name="uq_shot_revisions_rev"),)

    id: Mapped[int] = mapped_column(BigInteger().with_variant(Integer, "sqlite"), primary_key=True)
    shot_pk: Mapped[int] = mapped_column(ForeignKey("shots.id", ondelete="CASCADE"), index=True)
    revision: Mapped[int] = mapped_column(Integer)
    raw_payload: Mapped[dict[str, Any]] = mapped_column(JSON)
    payload_sha256: Mapped[str] = mapped_column(String(64))
    reason: Mapped[str] = mapped_column(Text, default="")
    author: Mapped[str] = mapped_column(String(200), default="")
    created_at: Mapped[datetime] = mapped_column(_utc_dt())


class Evaluation(Base):
    """The current model evaluation of a shot (one row per shot)."""

    __tablename__ = "evaluations"
    __table_args__ = (Index("ix_evaluations_campaign_status", "campaign_id", "status"),)

    shot_pk: Mapped[int] = mapped_column(ForeignKey("shots.id", ondelete="CASCADE"), primary_key=True)
    # Denormalised so that counts by status aggregate without a join.
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaigns.id", ondelete="CASCADE"))
    model_version: Mapped[str] = mapped_column(String(32))
    settings_version: Mapped[int] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16))
    evaluated_at: Mapped[datetime] = mapped_column(_utc_dt())
    # Input paths the shot left out that took their model defaults (listed on the shot's answer and page).
    defaulted_fields: Mapped[list[str]] = mapped_column(JSON, default=list)

    plasma_frequency_ghz: Mapped[float | None] = mapped_column(Float)
    plasma_wavelength_mm: Mapped[float | None] = mapped_column(Float)
    skin_depth_mm: Mapped[float | None] = mapped_column(Float)
    wavebreaking_field_gv_m: Mapped[float | None] = mapped_column(Float)
    lorentz_gamma: Mapped[float | None] = mapped_column(Float)
    peak_beam_density_cm3: Mapped[float | None] = mapped_column(Float)
    density_ratio: Mapped[float | None] = mapped_column(Float)
    kp_sigma_r: Mapped[float | None] = mapped_column(Float)
    bunch_length_over_plasma_wavelength: Mapped[float | None] = mapped_column(Float)
    geometric_emittance_nm: Mapped[float | None] = mapped_column(Float)
    waist_beta_m: Mapped[float | None] = mapped_column(Float)
    seed_density_cm3: Mapped[float | None] = mapped_column(Float)
    seed_field_mv_m: Mapped[float | None] = mapped_column(Float)
    seed_to_noise_efolds: Mapped[float | None] = mapped_column(Float)
    efolds_exit: Mapped[float | None] = mapped_column(Float)
    modulation_exit: Mapped[float | None] = mapped_column(Float)
    growth_margin_efolds: Mapped[float | None] = mapped_column(Float)
    saturation_length_m: Mapped[float | None] = mapped_column(Float)
    wakefield_estimate_mv_m: Mapped[float | None] = mapped_column(Float)
    hosing_efolds_exit: Mapped[float | None] = mapped_column(Float)
    asymptotic_validity: Mapped[float | None] = mapped_column(Float)
    phase_slip_rad: Mapped[float | None] = mapped_column(Float)
    phase_velocity_deficit: Mapped[float | None] = mapped_column(Float)
    phase_per_pct_density_rad: Mapped[float | None] = mapped_column(Float)
    density_tolerance_pct: Mapped[float | None] = mapped_column(Float)
    compensating_gradient_pct_per_m: Mapped[float | None] = mapped_column(Float)
    gradient_phase_error_rad: Mapped[float | None] = mapped_column(Float)
    hosing_ratio: Mapped[float | None] = mapped_column(Float)
    ion_motion_index: Mapped[float | None] = mapped_column(Float)
    divergence_ratio: Mapped[float | None] = mapped_column(Float)
    frequency_mismatch_pct: Mapped[float | None] = mapped_column(Float)
    implied_density_cm3: Mapped[float | None] = mapped_column(Float)

    shot: Mapped[Shot] = relationship(back_populates="evaluation")
    flags: Mapped[list[Flag]] = relationship(
        back_populates="evaluation", cascade="all, delete-orphan", order_by="Flag.id"
    )


class Flag(Base):
    """One fired regime rule of a shot's current evaluation."""

    __tablename__ = "flags"
    __table_args__ = (Index("ix_flags_campaign_code_severity", "campaign_id", "code", "severity"),)

    id: Mapped[int] = mapped_column(BigInteger().with_variant(Integer, "sqlite"), primary_key=True)
    shot_pk: Mapped[int] = mapped_column(ForeignKey("evaluations.shot_pk", ondelete="CASCADE"), index=True)
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaigns.id", ondelete="CASCADE"))
    code: Mapped[str] = mapped_column(String(32))
    severity: Mapped[str] = mapped_column(String(16))
    value: Mapped[float | None] = mapped_column(Float)
    limit: Mapped[float | None] = mapped_column("limit_value", Float)
    message: Mapped[str] = mapped_column(Text)

    evaluation: Mapped[Evaluation] = relationship(back_populates="flags")


class ApiToken(Base):
    __tablename__ = "api_tokens"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(200))
    role: Mapped[str] = mapped_column(String(16))
    # sha256 hex of the token; the token itself is never stored.
    token_sha256: Mapped[str] = mapped_column(String(64), unique=True)
    created_at: Mapped[datetime] = mapped_column(_utc_dt())
    revoked_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    # None: the token does not expire.
    expires_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    # Written at most once a minute per token (app.services.auth.LAST_USED_RESOLUTION).
    last_used_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    created_by: Mapped[str] = mapped_column(String(200), default="")


class BrowserSession(Base):
    """A signed-in browser: the cookie holds a random id whose sha256 is kept here, tied to
    the token that signed in (revoking the token ends its sessions)."""

    __tablename__ = "browser_sessions"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    session_sha256: Mapped[str] = mapped_column(String(64), unique=True)
    token_id: Mapped[int] = mapped_column(ForeignKey("api_tokens.id", ondelete="CASCADE"), index=True)
    # Sent back by every state-changing form and script request of this session.
    csrf_token: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[datetime] = mapped_column(_utc_dt())
    expires_at: Mapped[datetime] = mapped_column(_utc_dt())
    last_seen_at: Mapped[datetime] = mapped_column(_utc_dt())
    revoked_at: Mapped[datetime | None] = mapped_column(_utc_dt())


class AuditEntry(Base):
    __tablename__ = "audit_trail"
    # A campaign's latest entry is one seek (the overview's change marks read it on every poll).
    __table_args__ = (Index("ix_audit_trail_campaign_id", "campaign_slug", "id"),)

    id: Mapped[int] = mapped_column(BigInteger().with_variant(Integer, "sqlite"), primary_key=True)
    at: Mapped[datetime] = mapped_column(_utc_dt(), index=True)
    actor: Mapped[str] = mapped_column(String(200))
    action: Mapped[str] = mapped_column(String(64))
    campaign_slug: Mapped[str | None] = mapped_column(String(64))
    target: Mapped[str] = mapped_column(Text, default="")
    detail: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)


class Job(Base):
    """A background job (re-evaluation, detailed solver run) and its progress.

    A worker claims a queued job (or a running one whose lease ran out) by taking its lease:
    ``lease_owner`` and ``lease_expires_at``, renewed by the worker's heartbeat.
    """

    __tablename__ = "jobs"
    __table_args__ = (Index("ix_jobs_state_created", "state", "created_at"),)

    id: Mapped[str] = mapped_column(String(36), primary_key=True)
    kind: Mapped[str] = mapped_column(String(32))
    campaign_id: Mapped[int | None] = mapped_column(ForeignKey("campaigns.id", ondelete="CASCADE"))
    # queued | running | succeeded | failed | cancelled
    state: Mapped[str] = mapped_column(String(16))
    done: Mapped[int] = mapped_column(Integer, default=0)
    total: Mapped[int] = mapped_column(Integer, default=0)
    message: Mapped[str] = mapped_column(Text, default="")
    result: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    created_at: Mapped[datetime] = mapped_column(_utc_dt())
    started_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    finished_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    # Who asked for it: the audit actor, and the token (the per-token queue limit, cancelling).
    submitted_by: Mapped[str] = mapped_column(String(200), default="")
    submitter_token_id: Mapped[int | None] = mapped_column(ForeignKey("api_tokens.id", ondelete="SET NULL"))
    lease_owner: Mapped[str | None] = mapped_column(String(200))
    lease_expires_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    heartbeat_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    # How many times a worker has started it (1 + the resumptions after a lost lease).
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    cancel_requested_at: Mapped[datetime | None] = mapped_column(_utc_dt())
    # Where a resumed job picks up (its kind reads it: e.g. the solver's state).
    checkpoint: Mapped[bytes | None] = mapped_column(LargeBinary)
    # A queued job is not claimed before this instant (a retry waiting out its backoff).
    not_before: Mapped[datetime | None] = mapped_column(_utc_dt())


class DetailedRun(Base):
    """Stored result of the envelope solver (model.simulate_envelope) for one shot."""

    __tablename__ = "detailed_runs"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    shot_pk: Mapped[int] = mapped_column(ForeignKey("shots.id", ondelete="CASCADE"), index=True)
    job_id: Mapped[str | None] = mapped_column(ForeignKey("jobs.id", ondelete="SET NULL"))
    shot_revision: Mapped[int] = mapped_column(Integer)
    model_version: Mapped[str] = mapped_column(String(32))
    parameters: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    # Arrays as lists (z_m, zeta_m, sigma_r_m, reference_modulation, ez_v_m, ...).
    result: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    created_at: Mapped[datetime] = mapped_column(_utc_dt())


class AlertTarget(Base):
    """Where a campaign's alerts go: an HTTP(S) URL that receives a JSON body for every stored
    shot of one of ``statuses`` or carrying one of the rule codes ``flags``."""

    __tablename__ = "alert_targets"
    # Ids are never reused (SQLite would hand a deleted target's id to the next one, and a
    # delivery queued for the deleted target would reach the new one).
    __table_args__ = {"sqlite_autoincrement": True}

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaigns.id", ondelete="CASCADE"), index=True)
    url: Mapped[str] = mapped_column(Text)
    statuses: Mapped[list[str]] = mapped_column(JSON, default=list)
    flags: Mapped[list[str]] = mapped_column(JSON, default=list)
    created_at: Mapped[datetime] = mapped_column(_utc_dt())
    created_by: Mapped[str] = mapped_column(String(200), default="")


class AlertDelivery(Base):
    """One attempt to deliver one alert (a shot to a target): what the receiver answered.

    The target's URL is copied, so the log still reads after the target is deleted."""

    __tablename__ = "alert_deliveries"
    __table_args__ = (Index("ix_alert_deliveries_campaign_id", "campaign_id", "id"),)

    id: Mapped[int] = mapped_column(BigInteger().with_variant(Integer, "sqlite"), primary_key=True)
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaigns.id", ondelete="CASCADE"))
    target_id: Mapped[int | None] = mapped_column(ForeignKey("alert_targets.id", ondelete="SET NULL"))
    target_url: Mapped[str] = mapped_column(Text)
    job_id: Mapped[str | None] = mapped_column(String(36))
    shot_id: Mapped[str] = mapped_column(String(128))
    shot_revision: Mapped[int] = mapped_column(Integer, default=1)
    attempt: Mapped[int] = mapped_column(Integer, default=1)
    attempted_at: Mapped[datetime] = mapped_column(_utc_dt())
    # The receiver's HTTP status, or None when no answer came (error says why).
    status_code: Mapped[int | None] = mapped_column(Integer)
    error: Mapped[str] = mapped_column(Text, default="")
    # delivered | retrying | failed | skipped
    outcome: Mapped[str] = mapped_column(String(16))
    next_attempt_at: Mapped[datetime | None] = mapped_column(_utc_dt())
