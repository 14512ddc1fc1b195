"""Initial schema: every table of app/tables.py.

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "api_tokens",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("token_sha256", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("token_sha256"),
    )
    op.create_table(
        "audit_trail",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("actor", sa.String(length=200), nullable=False),
        sa.Column("action", sa.String(length=64), nullable=False),
        sa.Column("campaign_slug", sa.String(length=64), nullable=True),
        sa.Column("target", sa.Text(), nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("audit_trail", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_audit_trail_at"), ["at"], unique=False)

    op.create_table(
        "campaigns",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("slug", sa.String(length=64), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("timezone", sa.String(length=64), nullable=False),
        sa.Column("description", sa.Text(), nullable=False),
        sa.Column("model_settings", sa.JSON(), nullable=False),
        sa.Column("settings_version", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("slug"),
    )
    op.create_table(
        "jobs",
        sa.Column("id", sa.String(length=36), nullable=False),
        sa.Column("kind", sa.String(length=32), nullable=False),
        sa.Column("campaign_id", sa.Integer(), nullable=True),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("done", sa.Integer(), nullable=False),
        sa.Column("total", sa.Integer(), nullable=False),
        sa.Column("message", sa.Text(), nullable=False),
        sa.Column("result", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["campaign_id"], ["campaigns.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_table(
        "shots",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("campaign_id", sa.Integer(), nullable=False),
        sa.Column("shot_id", sa.String(length=128), nullable=False),
        sa.Column("taken_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revision", sa.Integer(), nullable=False),
        sa.Column("notes", sa.Text(), nullable=False),
        sa.Column("tags", sa.JSON(), nullable=False),
        sa.Column("raw_payload", sa.JSON(), nullable=False),
        sa.Column("payload_sha256", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("driver_species", sa.String(length=16), nullable=False),
        sa.Column("driver_mass_amu", sa.Float(), nullable=True),
        sa.Column("driver_charge_state", sa.Integer(), nullable=True),
        sa.Column("driver_momentum_gev", sa.Float(), nullable=False),
        sa.Column("driver_population", sa.Float(), nullable=False),
        sa.Column("driver_sigma_z_mm", sa.Float(), nullable=False),
        sa.Column("driver_sigma_r_mm", sa.Float(), nullable=False),
        sa.Column("driver_emittance_n_mm_mrad", sa.Float(), nullable=False),
        sa.Column("driver_offset_x_mm", sa.Float(), nullable=False),
        sa.Column("driver_offset_y_mm", sa.Float(), nullable=False),
        sa.Column("driver_angle_x_mrad", sa.Float(), nullable=False),
        sa.Column("driver_angle_y_mrad", sa.Float(), nullable=False),
        sa.Column("plasma_density_cm3", sa.Float(), nullable=False),
        sa.Column("plasma_gradient_pct_per_m", sa.Float(), nullable=False),
        sa.Column("plasma_length_m", sa.Float(), nullable=False),
        sa.Column("plasma_ion_mass_amu", sa.Float(), nullable=False),
        sa.Column("plasma_ion_charge", sa.Float(), nullable=False),
        sa.Column("seed_method", sa.String(length=32), nullable=False),
        sa.Column("seed_position_mm", sa.Float(), nullable=True),
        sa.Column("seed_electron_charge_pc", sa.Float(), nullable=True),
        sa.Column("seed_electron_sigma_z_mm", sa.Float(), nullable=True),
        sa.Column("seed_electron_sigma_r_mm", sa.Float(), nullable=True),
        sa.Column("measured_modulation_freq_ghz", sa.Float(), nullable=True),
        sa.Column("measured_microbunch_count", sa.Float(), nullable=True),
        sa.Column("measured_modulation_phase_rad", sa.Float(), nullable=True),
        sa.Column("measured_halo_radius_mm", sa.Float(), nullable=True),
        sa.Column("measured_witness_energy_mev", sa.Float(), nullable=True),
        sa.ForeignKeyConstraint(["campaign_id"], ["campaigns.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("campaign_id", "shot_id", name="uq_shots_campaign_shot_id"),
    )
    with op.batch_alter_table("shots", schema=None) as batch_op:
        batch_op.create_index("ix_shots_campaign_taken_at", ["campaign_id", "taken_at", "id"], unique=False)

    op.create_table(
        "detailed_runs",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("shot_pk", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("job_id", sa.String(length=36), nullable=True),
        sa.Column("shot_revision", sa.Integer(), nullable=False),
        sa.Column("model_version", sa.String(length=32), nullable=False),
        sa.Column("parameters", sa.JSON(), nullable=False),
        sa.Column("result", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["job_id"], ["jobs.id"], ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["shot_pk"], ["shots.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("detailed_runs", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_detailed_runs_shot_pk"), ["shot_pk"], unique=False)

    op.create_table(
        "evaluations",
        sa.Column("shot_pk", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("campaign_id", sa.Integer(), nullable=False),
        sa.Column("model_version", sa.String(length=32), nullable=False),
        sa.Column("settings_version", sa.Integer(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("evaluated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("plasma_frequency_ghz", sa.Float(), nullable=True),
        sa.Column("plasma_wavelength_mm", sa.Float(), nullable=True),
        sa.Column("skin_depth_mm", sa.Float(), nullable=True),
        sa.Column("wavebreaking_field_gv_m", sa.Float(), nullable=True),
        sa.Column("lorentz_gamma", sa.Float(), nullable=True),
        sa.Column("peak_beam_density_cm3", sa.Float(), nullable=True),
        sa.Column("density_ratio", sa.Float(), nullable=True),
        sa.Column("kp_sigma_r", sa.Float(), nullable=True),
        sa.Column("bunch_length_over_plasma_wavelength", sa.Float(), nullable=True),
        sa.Column("geometric_emittance_nm", sa.Float(), nullable=True),
        sa.Column("waist_beta_m", sa.Float(), nullable=True),
        sa.Column("seed_density_cm3", sa.Float(), nullable=True),
        sa.Column("seed_field_mv_m", sa.Float(), nullable=True),
        sa.Column("seed_to_noise_efolds", sa.Float(), nullable=True),
        sa.Column("efolds_exit", sa.Float(), nullable=True),
        sa.Column("modulation_exit", sa.Float(), nullable=True),
        sa.Column("growth_margin_efolds", sa.Float(), nullable=True),
        sa.Column("saturation_length_m", sa.Float(), nullable=True),
        sa.Column("wakefield_estimate_mv_m", sa.Float(), nullable=True),
        sa.Column("hosing_efolds_exit", sa.Float(), nullable=True),
        sa.Column("asymptotic_validity", sa.Float(), nullable=True),
        sa.Column("phase_slip_rad", sa.Float(), nullable=True),
        sa.Column("phase_velocity_deficit", sa.Float(), nullable=True),
        sa.Column("phase_per_pct_density_rad", sa.Float(), nullable=True),
        sa.Column("density_tolerance_pct", sa.Float(), nullable=True),
        sa.Column("compensating_gradient_pct_per_m", sa.Float(), nullable=True),
        sa.Column("gradient_phase_error_rad", sa.Float(), nullable=True),
        sa.Column("hosing_ratio", sa.Float(), nullable=True),
        sa.Column("ion_motion_index", sa.Float(), nullable=True),
        sa.Column("divergence_ratio", sa.Float(), nullable=True),
        sa.Column("frequency_mismatch_pct", sa.Float(), nullable=True),
        sa.Column("implied_density_cm3", sa.Float(), nullable=True),
        sa.ForeignKeyConstraint(["campaign_id"], ["campaigns.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["shot_pk"], ["shots.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("shot_pk"),
    )
    with op.batch_alter_table("evaluations", schema=None) as batch_op:
        batch_op.create_index("ix_evaluations_campaign_status", ["campaign_id", "status"], unique=False)

    op.create_table(
        "shot_revisions",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("shot_pk", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("revision", sa.Integer(), nullable=False),
        sa.Column("raw_payload", sa.JSON(), nullable=False),
        sa.Column("payload_sha256", sa.String(length=64), nullable=False),
        sa.Column("reason", sa.Text(), nullable=False),
        sa.Column("author", sa.String(length=200), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["shot_pk"], ["shots.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("shot_pk", "revision", name="uq_shot_revisions_rev"),
    )
    with op.batch_alter_table("shot_revisions", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_shot_revisions_shot_pk"), ["shot_pk"], unique=False)

    op.create_table(
        "flags",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("shot_pk", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("campaign_id", sa.Integer(), nullable=False),
        sa.Column("code", sa.String(length=32), nullable=False),
        sa.Column("severity", sa.String(length=16), nullable=False),
        sa.Column("value", sa.Float(), nullable=True),
        sa.Column("limit_value", sa.Float(), nullable=True),
        sa.Column("message", sa.Text(), nullable=False),
        sa.ForeignKeyConstraint(["campaign_id"], ["campaigns.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["shot_pk"], ["evaluations.shot_pk"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("flags", schema=None) as batch_op:
        batch_op.create_index("ix_flags_campaign_code_severity", ["campaign_id", "code", "severity"], unique=False)
        batch_op.create_index(batch_op.f("ix_flags_shot_pk"), ["shot_pk"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("flags", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_flags_shot_pk"))
        batch_op.drop_index("ix_flags_campaign_code_severity")

    op.drop_table("flags")
    with op.batch_alter_table("shot_revisions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_shot_revisions_shot_pk"))

    op.drop_table("shot_revisions")
    with op.batch_alter_table("evaluations", schema=None) as batch_op:
        batch_op.drop_index("ix_evaluations_campaign_status")

    op.drop_table("evaluations")
    with op.batch_alter_table("detailed_runs", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_detailed_runs_shot_pk"))

    op.drop_table("detailed_runs")
    with op.batch_alter_table("shots", schema=None) as batch_op:
        batch_op.drop_index("ix_shots_campaign_taken_at")

    op.drop_table("shots")
    op.drop_table("jobs")
    op.drop_table("campaigns")
    with op.batch_alter_table("audit_trail", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_audit_trail_at"))

    op.drop_table("audit_trail")
    op.drop_table("api_tokens")
