"""Settings refuse an unauthenticated server on a public address unless told it is intended."""

from __future__ import annotations

import pytest
from pydantic import ValidationError

from calibrant.config import Settings

PUBLIC_HOSTS = ["0.0.0.0", "::", "192.0.2.10", "calibrant.example.org"]  # noqa: S104


@pytest.mark.parametrize("host", PUBLIC_HOSTS)
def test_auth_off_on_public_address_is_refused(host: str) -> None:
    with pytest.raises(ValidationError, match="ALLOW_OPEN_PUBLIC"):
        Settings(auth="off", host=host)


@pytest.mark.parametrize("host", PUBLIC_HOSTS)
def test_auth_off_on_public_address_is_allowed_when_explicitly_opened(host: str) -> None:
    settings = Settings(auth="off", host=host, allow_open_public=True)
    assert settings.keys_required is False


@pytest.mark.parametrize("host", ["127.0.0.1", "127.0.0.2", "::1", "localhost"])
def test_loopback_needs_no_key_by_default_and_may_turn_auth_off(host: str) -> None:
    assert Settings(host=host).keys_required is False
    assert Settings(host=host, auth="off").keys_required is False


@pytest.mark.parametrize("host", PUBLIC_HOSTS)
def test_public_address_requires_keys_by_default(host: str) -> None:
    assert Settings(host=host).keys_required is True


def test_auth_required_applies_on_loopback_too() -> None:
    assert Settings(host="127.0.0.1", auth="required").keys_required is True


def test_settings_come_from_prefixed_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("CALIBRANT_AUTH", "off")
    monkeypatch.setenv("CALIBRANT_HOST", "0.0.0.0")  # noqa: S104 — the refused combination
    with pytest.raises(ValidationError):
        Settings()
    monkeypatch.setenv("CALIBRANT_ALLOW_OPEN_PUBLIC", "true")
    assert Settings().allow_open_public is True
