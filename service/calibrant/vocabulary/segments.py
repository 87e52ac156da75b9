"""Segments: the "all predictions" sentinel, the tag keys segments are cut by, the ``key:value`` text."""

from __future__ import annotations

import re

from calibrant.errors import invalid

ALL_SEGMENT = ""  # segment key and value of the "all predictions" stream; no tag key is empty

TAG_KEY_PATTERN = r"^[A-Za-z0-9_.-]{1,64}$"
_TAG_KEY = re.compile(TAG_KEY_PATTERN)


def is_tag_key(text: str) -> bool:
    """A tag key (and so a segment key): 1-64 of ``A-Z a-z 0-9 _ . -``."""
    return _TAG_KEY.fullmatch(text) is not None


def parse_tag(field: str, text: str) -> tuple[str, str]:
    """Split ``key:value`` at the first colon; a 422 naming ``field`` when either side is empty."""
    key, sep, value = text.partition(":")
    if not sep or not key or not value:
        raise invalid(field, "must be key:value, e.g. region:north")
    return key, value
