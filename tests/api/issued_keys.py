"""Issuing and revoking API keys the way an operator does: through the ``calibrant`` command."""

from __future__ import annotations

import pytest

from calibrant import cli
from tests.conftest import Database


def run_cli(db: Database, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture, *argv: str):
    """Run ``calibrant argv...`` against ``db``; returns (exit code, stdout, stderr)."""
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    capsys.readouterr()  # drop anything printed before
    code = cli.main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def create_key(
    db: Database,
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture,
    scope: str,
    model: str | None = None,
) -> str:
    """A new key's token, as printed once by ``calibrant keys create``."""
    argv = ["keys", "create", "--scope", scope] + (["--model", model] if model else [])
    code, out, _err = run_cli(db, monkeypatch, capsys, *argv)
    assert code == 0
    token = out.strip()
    assert token
    assert "\n" not in token
    return token


def bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}
