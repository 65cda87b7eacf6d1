"""``spatline migrate`` and ``spatline keys create | list | revoke`` against a scratch SQLite
database: the key is printed once, stored only as a hash, listed by prefix, revocable."""

from __future__ import annotations

import datetime as dt
import hashlib

import pytest
from sqlalchemy import select, update

from app.auth.models import ApiKey
from app.cli import main
from app.db import make_engine, make_sessionmaker
from app.settings import Settings


@pytest.fixture
def cli_settings(tmp_path, monkeypatch) -> Settings:
    url = f"sqlite:///{tmp_path / 'cli.db'}"
    monkeypatch.setenv("SPATLINE_DATABASE_URL", url)
    monkeypatch.setenv("SPATLINE_ENVIRONMENT", "test")
    monkeypatch.setenv("SPATLINE_SECRET_KEY", "cli-test-secret-0123456789")
    return Settings(_env_file=None)


def _stored_keys(settings: Settings) -> list[ApiKey]:
    engine = make_engine(settings)
    try:
        with make_sessionmaker(engine)() as session:
            return list(session.scalars(select(ApiKey).order_by(ApiKey.id)))
    finally:
        engine.dispose()


def test_keys_before_migrate_say_what_to_do(cli_settings, capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["keys", "list"])
    assert "spatline migrate" in str(exit_info.value.code)


def test_create_list_revoke(cli_settings, capsys):
    assert main(["migrate"]) == 0
    capsys.readouterr()

    assert main(["keys", "create", "--role", "admin", "--label", "first admin"]) == 0
    out, err = capsys.readouterr()
    plaintext = out.strip()
    assert plaintext.startswith("spl_")
    assert "shown only this once" in err
    assert plaintext not in err

    [stored] = _stored_keys(cli_settings)
    assert stored.role == "admin"
    assert stored.label == "first admin"
    assert stored.key_hash == hashlib.sha256(plaintext.encode()).hexdigest()

    assert main(["keys", "list"]) == 0
    listing = capsys.readouterr().out
    assert plaintext[:8] in listing
    assert plaintext not in listing
    assert "active" in listing

    assert main(["keys", "revoke", str(stored.id)]) == 0
    capsys.readouterr()
    [revoked] = _stored_keys(cli_settings)
    assert revoked.revoked_at is not None
    main(["keys", "list"])
    assert "revoked" in capsys.readouterr().out


def test_revoke_unknown_key_fails(cli_settings, capsys):
    main(["migrate"])
    assert main(["keys", "revoke", "999"]) == 1
    assert "no key with id 999" in capsys.readouterr().err


def test_device_keys_are_not_made_from_the_cli(cli_settings, capsys):
    with pytest.raises(SystemExit):
        main(["keys", "create", "--role", "device", "--label", "x"])
    assert "invalid choice" in capsys.readouterr().err


def test_invalid_settings_stop_the_cli_with_the_reason(cli_settings, monkeypatch):
    monkeypatch.delenv("SPATLINE_SECRET_KEY")
    monkeypatch.setenv("SPATLINE_ENVIRONMENT", "production")
    with pytest.raises(SystemExit) as exit_info:
        main(["migrate"])
    assert "SPATLINE_SECRET_KEY" in str(exit_info.value.code)


def test_key_list_columns_line_up(cli_settings, capsys):
    assert main(["migrate"]) == 0
    for label in ("a", "a much longer label"):
        assert main(["keys", "create", "--role", "viewer", "--label", label]) == 0
    # One key has been used (a long timestamp), the other not ("never").
    engine = make_engine(cli_settings)
    with engine.begin() as connection:
        connection.execute(
            update(ApiKey).where(ApiKey.label == "a").values(
                last_used_at=dt.datetime(2026, 5, 4, 9, 30, 15, 123456, tzinfo=dt.UTC))
        )
    engine.dispose()
    capsys.readouterr()
    assert main(["keys", "list"]) == 0
    header, *rows = capsys.readouterr().out.splitlines()
    assert len(rows) == 2
    column = header.index("LABEL")
    assert {row[column:] for row in rows} == {"a", "a much longer label"}
    used = header.index("LAST USED")
    assert {row[used:].split("  ")[0] for row in rows} == {"2026-05-04 09:30:15", "never"}
