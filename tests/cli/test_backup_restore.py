"""`wakeledger backup --out FILE` and `wakeledger restore FILE` on SQLite: a round trip brings the
shots back; PostgreSQL is answered with the pg_dump / pg_restore line to run instead."""

from __future__ import annotations

import pytest


@pytest.fixture
def backend() -> str:
    return "sqlite"  # the commands copy SQLite files; PostgreSQL gets the pg_dump line (below)


def _shot_ids(client, campaign, headers) -> list[str]:
    return sorted(
        s["shot_id"] for s in client.get(f"/api/v1/campaigns/{campaign}/shots", headers=headers).json()["items"]
    )


def test_a_backup_taken_while_serving_restores_the_shots_changed_since(
    run, tmp_path, database_url, client, campaign, ingest_headers, viewer_headers, make_shot
):
    for i in range(3):
        assert (
            client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot(i), headers=ingest_headers).status_code
            == 201
        )
    before = _shot_ids(client, campaign, viewer_headers)

    code, out, err = run("backup", "--out", "nightly.db", "--database-url", database_url)
    assert code == 0, err
    assert out.startswith("wrote nightly.db: a copy of ") and "revision " in out
    assert (tmp_path / "nightly.db").exists() and not (tmp_path / "nightly.db-wal").exists()

    extra = make_shot(0, shot_id="after-the-backup")
    assert client.post(f"/api/v1/campaigns/{campaign}/shots", json=extra, headers=ingest_headers).status_code == 201
    assert "after-the-backup" in _shot_ids(client, campaign, viewer_headers)

    code, _out, err = run("restore", "nightly.db", "--database-url", database_url)
    assert code == 2 and "add --yes" in err  # a database with data is not replaced by accident
    code, out, err = run("restore", "nightly.db", "--yes", "--database-url", database_url)
    assert code == 0, err
    assert out.startswith("restored ")
    assert _shot_ids(client, campaign, viewer_headers) == before  # the server's open connections see it


def test_backup_refuses_to_overwrite_a_file_and_restore_refuses_what_is_not_a_backup(run, tmp_path, database_url):
    (tmp_path / "taken.db").write_text("keep me")
    code, _out, err = run("backup", "--out", "taken.db", "--database-url", database_url)
    assert code == 2 and "exists already" in err
    assert (tmp_path / "taken.db").read_text() == "keep me"
    code, _out, err = run("restore", "taken.db", "--yes", "--database-url", database_url)
    assert code == 2 and "is not a SQLite database" in err
    code, _out, err = run("restore", "missing.db", "--database-url", database_url)
    assert code == 2 and "there is no file" in err


def test_a_restore_into_a_missing_database_creates_it(run, tmp_path, database_url):
    assert run("backup", "--out", "copy.db", "--database-url", database_url)[0] == 0
    code, _out, err = run("restore", "copy.db", "--database-url", "sqlite:///./fresh.db")
    assert code == 0, err
    assert run("token", "list", "--database-url", "sqlite:///./fresh.db")[0] == 0


def test_on_postgresql_backup_and_restore_print_the_pg_dump_and_pg_restore_lines_without_the_password(run):
    url = "postgresql+psycopg://wakeledger:s3cret@db:5432/wakeledger"
    code, _out, err = run("backup", "--out", "nightly.dump", "--database-url", url)
    assert code == 2
    assert "pg_dump --format=custom --file nightly.dump 'postgresql://wakeledger:***@db:5432/wakeledger'" in err
    code, _out, err = run("restore", "nightly.dump", "--database-url", url)
    assert code == 2
    assert "pg_restore --clean --if-exists --no-owner --dbname 'postgresql://wakeledger:***@db:5432/wakeledger'" in err
    assert "s3cret" not in err
