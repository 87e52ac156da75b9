"""``errors.field_errors``: the one translation of pydantic's errors into field errors."""

from __future__ import annotations

import pytest
from fastapi.exceptions import RequestValidationError
from pydantic import BaseModel, ValidationError, model_validator

from calibrant import cli
from calibrant.errors import FieldError, field_errors


class Window(BaseModel):
    days: int
    limits: list[float]

    @model_validator(mode="after")
    def _ordered(self) -> Window:
        if self.limits != sorted(self.limits):
            raise ValueError("limits must be ascending")
        return self


def _error_of(doc: dict) -> ValidationError:
    with pytest.raises(ValidationError) as caught:
        Window.model_validate(doc)
    return caught.value


def test_each_location_becomes_a_dotted_field_name() -> None:
    exc = _error_of({"days": "three", "limits": [0.1, "high"]})
    assert [(e.index, e.field) for e in field_errors(exc)] == [(None, "days"), (None, "limits.1")]
    assert all(e.message for e in field_errors(exc))


def test_a_prefix_names_where_the_document_sits() -> None:
    exc = _error_of({"days": "three", "limits": [0.1, "high"]})
    assert [e.field for e in field_errors(exc, "params")] == ["params.days", "params.limits.1"]


def test_a_check_on_the_whole_document_is_named_by_the_prefix_or_whole() -> None:
    exc = _error_of({"days": 7, "limits": [0.9, 0.1]})
    assert field_errors(exc) == [FieldError(None, "body", "Value error, limits must be ascending")]
    assert [e.field for e in field_errors(exc, "params")] == ["params"]
    assert [e.field for e in field_errors(exc, whole="settings")] == ["settings"]


def test_request_errors_drop_the_source_unless_it_is_all_there_is() -> None:
    exc = RequestValidationError([
        {"loc": ("query", "limit"), "msg": "Input should be a valid integer", "type": "int_parsing"},
        {"loc": ("body", "types", 0), "msg": "Input should be 'alarm.opened'", "type": "literal_error"},
        {"loc": ("body",), "msg": "Field required", "type": "missing"},
    ])
    assert [e.field for e in field_errors(exc, source_first=True)] == ["limit", "types.0", "body"]


def test_the_command_names_the_variable_or_the_settings_as_a_whole(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.setenv("CALIBRANT_PORT", "eighty")
    with pytest.raises(SystemExit) as caught:
        cli.main(["migrate"])
    assert "\n  CALIBRANT_PORT: Input should be a valid integer" in str(caught.value.code)

    monkeypatch.delenv("CALIBRANT_PORT")
    monkeypatch.setenv("CALIBRANT_AUTH", "off")
    monkeypatch.setenv("CALIBRANT_HOST", "0.0.0.0")  # noqa: S104 — the refused combination
    with pytest.raises(SystemExit) as caught:
        cli.main(["migrate"])
    assert "\n  settings: " in str(caught.value.code)
