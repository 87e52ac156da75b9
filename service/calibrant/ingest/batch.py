"""Validation of ingest batches into columns.

Bodies are parsed with orjson and checked item by item in one tight loop that
collects *every* problem (the caller wants the full list in one 422), then
handed on as plain columns. Building a Pydantic object per item costs about
three times the whole columnar pass at 10,000 items, so the Pydantic schemas
in ``ingest.schemas`` exist for the OpenAPI document only.
"""

from __future__ import annotations

import math
from datetime import datetime
from typing import Any

import orjson

from calibrant.errors import FieldError, InvalidInput
from calibrant.store.batches import OutcomeColumns, PredictionColumns
from calibrant.vocabulary.instants import InstantWindow, parse_instant_within
from calibrant.vocabulary.segments import is_tag_key

MAX_ID_LENGTH = 200
MAX_VERSION_LENGTH = 64
MAX_TAGS = 16
MAX_TAG_VALUE_LENGTH = 128
DEFAULT_VERSION = "default"

_PREDICTION_FIELDS = frozenset({"id", "probability", "scored_at", "version", "tags"})
_OUTCOME_FIELDS = frozenset({"id", "label", "observed_at", "occurred_at"})


def _load_items(body: bytes, member: str, max_items: int) -> list[Any]:
    try:
        doc = orjson.loads(body)
    except orjson.JSONDecodeError as exc:
        raise InvalidInput("body is not valid JSON", [FieldError(None, "body", str(exc))]) from None
    if not isinstance(doc, dict):
        raise InvalidInput(
            "body must be a JSON object", [FieldError(None, "body", f'expected {{"{member}": [...]}}')]
        )
    unknown = sorted(set(doc) - {member})
    errors = [FieldError(None, key, "unknown field") for key in unknown]
    items = doc.get(member)
    if not isinstance(items, list):
        errors.append(FieldError(None, member, "required: a list of items"))
    elif len(items) > max_items:
        errors.append(
            FieldError(None, member, f"{len(items)} items; at most {max_items} per request")
        )
    if errors:
        raise InvalidInput(f"the body does not have the shape {{{member!r}: [...]}}", errors)
    assert isinstance(items, list)  # anything else was reported as an error above
    return items


def _check_id(value: object, index: int, errors: list[FieldError]) -> str:
    if not isinstance(value, str):
        errors.append(FieldError(index, "id", "required: a string"))
        return ""
    if not 1 <= len(value) <= MAX_ID_LENGTH:
        errors.append(FieldError(index, "id", f"must be 1 to {MAX_ID_LENGTH} characters"))
    return value


class _TagCache:
    """Canonical JSON of tag maps already found valid in this batch.

    Production traffic repeats a handful of tag combinations, so checking and
    serialising each distinct map once (keyed by its items, in sent order)
    takes the tag work off the per-item path.
    """

    def __init__(self) -> None:
        self.canonical: dict[tuple[tuple[str, object], ...], str | None] = {}

    def check(self, value: object, index: int, errors: list[FieldError]) -> str | None:
        if not isinstance(value, dict):
            return _check_tags(value, index, errors)
        try:
            key = tuple(value.items())
            return self.canonical[key]
        except (KeyError, TypeError):  # new map, or values that cannot be hashed (invalid)
            pass
        before = len(errors)
        canonical = _check_tags(value, index, errors)
        if len(errors) == before:
            self.canonical[key] = canonical
        return canonical


def _check_tags(value: object, index: int, errors: list[FieldError]) -> str | None:
    if value is None:
        return None
    if not isinstance(value, dict):
        errors.append(FieldError(index, "tags", "must be an object of string to string"))
        return None
    if len(value) > MAX_TAGS:
        errors.append(FieldError(index, "tags", f"at most {MAX_TAGS} keys"))
    for key, tag_value in value.items():
        if not is_tag_key(key):
            errors.append(
                FieldError(index, f"tags.{key}", "key must be 1-64 of A-Z a-z 0-9 _ . -")
            )
        if not isinstance(tag_value, str) or len(tag_value) > MAX_TAG_VALUE_LENGTH:
            errors.append(
                FieldError(
                    index, f"tags.{key}", f"value must be a string of at most {MAX_TAG_VALUE_LENGTH}"
                )
            )
    if not value:
        return None
    return orjson.dumps(value, option=orjson.OPT_SORT_KEYS).decode()


def parse_predictions(body: bytes, max_items: int, window: InstantWindow) -> PredictionColumns:
    """Validate a predictions body; raise ``InvalidInput`` listing every bad item.

    ``scored_at`` must lie in ``window`` (``vocabulary.instants``)."""
    return check_predictions(_load_items(body, "predictions", max_items), window)


def check_predictions(items: list[Any], window: InstantWindow) -> PredictionColumns:
    """Validate prediction items already read (from a body or a file); ``InvalidInput`` lists
    every bad item by its index in ``items``."""
    errors: list[FieldError] = []
    case_ids: list[str] = []
    versions: list[str] = []
    probabilities: list[float] = []
    times: list[datetime] = []
    tags: list[str | None] = []
    seen: dict[tuple[str, str], int] = {}
    tag_cache = _TagCache()
    for index, item in enumerate(items):
        if not isinstance(item, dict):
            errors.append(FieldError(index, "item", "must be an object"))
            continue
        if not item.keys() <= _PREDICTION_FIELDS:
            errors.extend(
                FieldError(index, k, "unknown field") for k in sorted(item.keys() - _PREDICTION_FIELDS)
            )
        case_id = _check_id(item.get("id"), index, errors)

        p = item.get("probability")
        if isinstance(p, bool) or not isinstance(p, int | float):
            errors.append(FieldError(index, "probability", "required: a number in [0, 1]"))
            p = 0.0
        elif not (math.isfinite(p) and 0.0 <= p <= 1.0):
            errors.append(FieldError(index, "probability", f"{p!r} is outside [0, 1]"))

        when = parse_instant_within(item.get("scored_at"), window)
        if isinstance(when, str):
            errors.append(FieldError(index, "scored_at", when))

        version = item.get("version", DEFAULT_VERSION)
        if not isinstance(version, str) or not 1 <= len(version) <= MAX_VERSION_LENGTH:
            errors.append(
                FieldError(index, "version", f"must be a string of 1 to {MAX_VERSION_LENGTH}")
            )
            version = DEFAULT_VERSION

        canonical_tags = tag_cache.check(item.get("tags"), index, errors)

        key = (version, case_id)
        first = seen.setdefault(key, index)
        if first != index:
            errors.append(
                FieldError(index, "id", f"repeats item {first} (same version and id in one batch)")
            )
        case_ids.append(case_id)
        versions.append(version)
        probabilities.append(float(p))
        times.append(when)  # type: ignore[arg-type]  # only used when errors is empty
        tags.append(canonical_tags)
    if errors:
        raise InvalidInput(f"{_count_items(errors)} item(s) are invalid; nothing was stored", errors)
    return PredictionColumns(case_ids, versions, probabilities, times, tags)


def parse_outcomes(body: bytes, max_items: int, window: InstantWindow) -> OutcomeColumns:
    """Validate an outcomes body; raise ``InvalidInput`` listing every bad item.

    ``observed_at`` must lie in ``window`` (``vocabulary.instants``)."""
    return check_outcomes(_load_items(body, "outcomes", max_items), window)


def check_outcomes(items: list[Any], window: InstantWindow) -> OutcomeColumns:
    """Validate outcome items already read (from a body or a file); ``InvalidInput`` lists
    every bad item by its index in ``items``."""
    errors: list[FieldError] = []
    case_ids: list[str] = []
    labels: list[int] = []
    times: list[datetime] = []
    occurred: list[datetime | None] = []
    seen: dict[str, int] = {}
    for index, item in enumerate(items):
        if not isinstance(item, dict):
            errors.append(FieldError(index, "item", "must be an object"))
            continue
        if not item.keys() <= _OUTCOME_FIELDS:
            errors.extend(
                FieldError(index, k, "unknown field") for k in sorted(item.keys() - _OUTCOME_FIELDS)
            )
        case_id = _check_id(item.get("id"), index, errors)
        label = item.get("label")
        if label is True or label is False:
            label = int(label)
        elif label not in (0, 1) or isinstance(label, float):
            errors.append(FieldError(index, "label", "required: 0, 1, true or false"))
            label = 0
        when = parse_instant_within(item.get("observed_at"), window)
        if isinstance(when, str):
            errors.append(FieldError(index, "observed_at", when))
        happened = _check_occurred(item.get("occurred_at"), when, window, index, errors)
        first = seen.setdefault(case_id, index)
        if first != index:
            errors.append(FieldError(index, "id", f"repeats item {first} (same id in one batch)"))
        case_ids.append(case_id)
        labels.append(int(label))
        times.append(when)  # type: ignore[arg-type]
        occurred.append(happened)
    if errors:
        raise InvalidInput(f"{_count_items(errors)} item(s) are invalid; nothing was stored", errors)
    return OutcomeColumns(case_ids, labels, times, occurred)


def _check_occurred(value: object, observed: datetime | str, window: InstantWindow, index: int,
                    errors: list[FieldError]) -> datetime | None:
    """``occurred_at`` is optional; when sent, an RFC 3339 instant in the accepted ``window``
    (like every stored event time) and no later than ``observed_at`` (an event is reported after
    it happens)."""
    if value is None:
        return None
    when = parse_instant_within(value, window)
    if isinstance(when, str):
        errors.append(FieldError(index, "occurred_at", when))
        return None
    if isinstance(observed, datetime) and when > observed:
        errors.append(FieldError(index, "occurred_at", "must not be after observed_at"))
    return when


def _count_items(errors: list[FieldError]) -> int:
    return len({e.index for e in errors})
