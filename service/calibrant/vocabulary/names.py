"""Names a client chooses: models, rules. One pattern, so every door says the same thing."""

from __future__ import annotations

import re

from calibrant.errors import FieldError, InvalidInput

NAME_PATTERN = r"^[a-z0-9][a-z0-9_-]{0,63}$"
_NAME = re.compile(NAME_PATTERN)


def is_name(text: object) -> bool:
    """A lowercase name of 1-64 characters: letters, digits, ``_`` and ``-``, not starting with a sign."""
    return isinstance(text, str) and _NAME.fullmatch(text) is not None


def check_name(text: str, field: str = "model") -> str:
    """``text`` unchanged if it is a name; else a 422 naming ``field`` and quoting the pattern."""
    if not is_name(text):
        raise InvalidInput(
            f"{field} name {text!r} is not allowed", [FieldError(None, field, f"must match {NAME_PATTERN}")]
        )
    return text
