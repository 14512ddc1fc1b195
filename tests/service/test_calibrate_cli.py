"""wakeledger calibrate: prints the density scale, its changes, the scaling checks and the drivers
as a table, and with --apply makes the estimate the campaign's density_scale (audited, re-evaluated)."""

from __future__ import annotations

from datetime import UTC, datetime

from sqlalchemy import select

from app.cli import main
from app.tables import AuditEntry, Campaign
from tests.support.calibration_shots import shots_from_columns, synthetic_columns


def test_calibrate_prints_the_table_and_apply_sets_the_scale(
    app, client, campaign, ingest_headers, database_url, capsys, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 200, scale=1.021, seed=21)
    shots = shots_from_columns(columns, datetime(2026, 11, 16, 8, tzinfo=UTC))
    response = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    assert response.status_code == 201
    assert (
        main(["--database-url", database_url, "calibrate", "--campaign", campaign, "--from", "2026-11-16T00:00:00Z"])
        == 0
    )
    out = capsys.readouterr().out
    assert "density scale  1.02" in out and "changes of the scale: none found" in out
    assert "measured.halo_radius_mm" in out and "correlation is not cause" in out
    assert main(["--database-url", database_url, "calibrate", "--campaign", campaign, "--apply"]) == 0
    assert "re-evaluation job" in capsys.readouterr().out
    with app.state.session_factory() as session:
        stored = session.scalar(select(Campaign).where(Campaign.slug == campaign))
        assert abs(stored.model_settings["density_scale"] - 1.021) < 0.001
        actions = session.scalars(select(AuditEntry.action)).all()
        assert "campaign.settings" in actions


def test_calibrate_names_a_bad_option_and_an_unknown_campaign(database_url, capsys, campaign):
    assert main(["--database-url", database_url, "calibrate", "--campaign", campaign, "--from", "yesterday"]) == 2
    assert "--from" in capsys.readouterr().err
    assert main(["--database-url", database_url, "calibrate", "--campaign", "nowhere"]) == 1
    assert "nowhere" in capsys.readouterr().err
