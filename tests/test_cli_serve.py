"""``calibrant serve`` refuses to listen publicly without keys, and serves once one exists."""

from __future__ import annotations

import pytest
import uvicorn

from tests.api.issued_keys import create_key, run_cli
from tests.conftest import Database


class ServeRecorder:
    """Stands in for uvicorn.run so a test can see whether the server would have started."""

    def __init__(self) -> None:
        self.calls: list[dict] = []

    def __call__(self, app, **kwargs) -> None:
        self.calls.append(kwargs)


def _forbid_serving(monkeypatch: pytest.MonkeyPatch) -> None:
    def refuse(*_args, **_kwargs) -> None:
        pytest.fail("uvicorn.run was called although serve should have refused")

    monkeypatch.setattr(uvicorn, "run", refuse)


def test_public_host_without_keys_refuses_with_exit_code_2(db: Database, monkeypatch, capsys) -> None:
    _forbid_serving(monkeypatch)
    code, _out, err = run_cli(db, monkeypatch, capsys, "serve", "--host", "0.0.0.0")  # noqa: S104
    assert code == 2
    assert "calibrant keys create" in err  # the refusal tells the operator what to do


def test_public_host_with_only_revoked_keys_refuses(db: Database, monkeypatch, capsys) -> None:
    create_key(db, monkeypatch, capsys, "admin")
    key_id = db.scalar("SELECT key_id FROM api_keys")
    assert run_cli(db, monkeypatch, capsys, "keys", "revoke", str(key_id))[0] == 0
    _forbid_serving(monkeypatch)
    code, _out, _err = run_cli(db, monkeypatch, capsys, "serve", "--host", "0.0.0.0")  # noqa: S104
    assert code == 2


def test_public_host_with_a_key_serves(db: Database, monkeypatch, capsys) -> None:
    create_key(db, monkeypatch, capsys, "admin")
    recorder = ServeRecorder()
    monkeypatch.setattr(uvicorn, "run", recorder)
    code, _out, _err = run_cli(db, monkeypatch, capsys, "serve", "--host", "0.0.0.0", "--port", "8123")  # noqa: S104
    assert code == 0
    assert [(c["host"], c["port"]) for c in recorder.calls] == [("0.0.0.0", 8123)]  # noqa: S104


def test_loopback_without_keys_serves(db: Database, monkeypatch, capsys) -> None:
    recorder = ServeRecorder()
    monkeypatch.setattr(uvicorn, "run", recorder)
    code, _out, _err = run_cli(db, monkeypatch, capsys, "serve", "--host", "127.0.0.1")
    assert code == 0
    assert [c["host"] for c in recorder.calls] == ["127.0.0.1"]


def test_auth_off_on_public_host_is_refused_at_settings(db: Database, monkeypatch, capsys) -> None:
    _forbid_serving(monkeypatch)
    monkeypatch.setenv("CALIBRANT_AUTH", "off")
    with pytest.raises(SystemExit) as exited:
        run_cli(db, monkeypatch, capsys, "serve", "--host", "0.0.0.0")  # noqa: S104
    assert "CALIBRANT_" in str(exited.value.code)  # the message names the setting to change
