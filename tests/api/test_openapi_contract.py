"""The OpenAPI document is one typed v1 contract a client can be generated from.

Every 2xx JSON response is a named schema (a ``$ref`` into components/schemas)
with properties; no schema keeps a name the service stopped using; every time
in a response model is the one ``Instant`` type (RFC 3339, UTC, ``Z``); the
counts of a metrics period are required integers. Building the document needs
no database, so these tests use none.
"""

from __future__ import annotations

import types
import typing
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta, timezone
from pathlib import Path
from typing import Any

import pytest
from fastapi.routing import APIRoute
from pydantic import (
    AwareDatetime,
    BaseModel,
    FutureDatetime,
    NaiveDatetime,
    PastDatetime,
    PlainSerializer,
    TypeAdapter,
    ValidationError,
)

from calibrant.api.instant import Instant
from calibrant.app import create_app
from calibrant.config import Settings

REF_PREFIX = "#/components/schemas/"
OLD_NAMES = frozenset({"fired", "firings", "event_kinds", "event_type", "labelled", "s", "h"})
OLD_FRAGMENT = "labelled"
PERIOD_COUNTS = ("n_predictions", "n_labeled", "n_immature")
# pydantic's datetime flavours are classes of their own, not datetime subclasses.
DATETIME_TYPES = (datetime, AwareDatetime, NaiveDatetime, PastDatetime, FutureDatetime)


@pytest.fixture(scope="module")
def app(tmp_path_factory: pytest.TempPathFactory):
    # The engine connects lazily; building the document never opens this file.
    path = Path(tmp_path_factory.mktemp("openapi")) / "unused.db"
    return create_app(Settings(database_url=f"sqlite:///{path}"))


@pytest.fixture(scope="module")
def document(app) -> dict[str, Any]:
    return app.openapi()


def _operations(document: dict[str, Any]) -> Iterator[tuple[str, dict[str, Any]]]:
    for path, item in document["paths"].items():
        for method, operation in item.items():
            yield f"{method.upper()} {path}", operation


def _untyped_success_responses(document: dict[str, Any]) -> list[str]:
    """Every 2xx JSON response whose schema is not a $ref to a component with properties."""
    components = document.get("components", {}).get("schemas", {})
    offenders = []
    for name, operation in _operations(document):
        for status, response in operation.get("responses", {}).items():
            if not status.startswith("2") or status == "204":
                continue
            content = response.get("content", {})
            json_content = {k: v for k, v in content.items() if k.endswith("json")}
            if not json_content and status != "201":
                continue
            if not json_content:  # a 201 that documents no body: a client cannot read what was made
                offenders.append(f"{name} {status}: no JSON body documented")
                continue
            for media, body in json_content.items():
                schema = body.get("schema", {})
                ref = schema.get("$ref", "")
                target = components.get(ref.removeprefix(REF_PREFIX)) if ref.startswith(REF_PREFIX) else None
                if target is None or not target.get("properties"):
                    offenders.append(f"{name} {status} {media}: {schema}")
    return offenders


def _property_names(schema: Any, where: str) -> Iterator[tuple[str, str]]:
    """(location, property name) for every property declared anywhere inside ``schema``."""
    if isinstance(schema, dict):
        for key, value in schema.items():
            if key == "properties" and isinstance(value, dict):
                for prop, sub in value.items():
                    yield where, prop
                    yield from _property_names(sub, f"{where}.{prop}")
            else:
                yield from _property_names(value, where)
    elif isinstance(schema, list):
        for item in schema:
            yield from _property_names(item, where)


def _old_names(document: dict[str, Any]) -> list[str]:
    found = []
    for component, schema in document.get("components", {}).get("schemas", {}).items():
        for where, prop in _property_names(schema, component):
            if prop in OLD_NAMES or OLD_FRAGMENT in prop:
                found.append(f"{where}: {prop}")
    return found


def test_every_json_success_response_is_a_named_object(document: dict[str, Any]) -> None:
    offenders = _untyped_success_responses(document)
    assert not offenders, "2xx responses without a named schema:\n" + "\n".join(offenders)


def test_the_response_check_names_an_untyped_body() -> None:
    document = {
        "paths": {
            "/typed": {"get": {"responses": {"200": {"content": {"application/json": {
                "schema": {"$ref": REF_PREFIX + "Thing"}}}}}}},
            "/loose": {"post": {"responses": {"200": {"content": {"application/json": {
                "schema": {"type": "object", "additionalProperties": True}}}}}}},
            "/empty": {"get": {"responses": {"200": {"content": {"application/json": {
                "schema": {"$ref": REF_PREFIX + "Empty"}}}}}}},
            "/gone": {"delete": {"responses": {"204": {"description": "No content"}}}},
        },
        "components": {"schemas": {"Thing": {"properties": {"a": {}}}, "Empty": {"type": "object"}}},
    }
    offenders = _untyped_success_responses(document)
    assert [o.split(" 200")[0] for o in offenders] == ["POST /loose", "GET /empty"]


def test_no_schema_keeps_an_old_name(document: dict[str, Any]) -> None:
    found = _old_names(document)
    assert not found, "properties with names the service no longer uses:\n" + "\n".join(found)


def test_the_old_name_check_looks_inside_nested_schemas() -> None:
    document = {"components": {"schemas": {"Outer": {"properties": {
        "inner": {"type": "object", "properties": {"min_labelled": {}, "h": {}}},
        "items": {"type": "array", "items": {"properties": {"fired": {}}}},
    }}}}}
    assert sorted(_old_names(document)) == [
        "Outer.inner: h", "Outer.inner: min_labelled", "Outer.items: fired",
    ]


def _api_routes(routes: list[Any]) -> Iterator[APIRoute]:
    for route in routes:
        # Newer FastAPI keeps an included router as one entry holding the router it came from.
        included = getattr(route, "original_router", None)
        if included is not None:
            yield from _api_routes(included.routes)
        elif isinstance(route, APIRoute):
            yield route


def _response_models(app) -> set[type[BaseModel]]:
    models: set[type[BaseModel]] = set()
    for route in _api_routes(app.routes):
        candidates = [route.response_model, *(r.get("model") for r in route.responses.values())]
        models.update(m for m in candidates if isinstance(m, type) and issubclass(m, BaseModel))
    return models


def _bare_datetimes(annotation: Any, metadata: list[Any], where: str, seen: set[type]) -> Iterator[str]:
    """Places where a datetime would be serialised by anything but the ``Instant`` serializer."""
    origin = typing.get_origin(annotation)
    if origin is typing.Annotated:
        base, *extra = typing.get_args(annotation)
        yield from _bare_datetimes(base, [*metadata, *extra], where, seen)
    elif annotation in DATETIME_TYPES:
        if not any(isinstance(m, PlainSerializer) and m is _INSTANT_SERIALIZER for m in metadata):
            yield where
    elif isinstance(annotation, type) and issubclass(annotation, BaseModel):
        if annotation not in seen:
            seen.add(annotation)
            for name, field in annotation.model_fields.items():
                yield from _bare_datetimes(field.annotation, list(field.metadata),
                                           f"{annotation.__name__}.{name}", seen)
    elif origin is not None or isinstance(annotation, types.UnionType):
        for arg in typing.get_args(annotation):
            yield from _bare_datetimes(arg, [], where, seen)


_INSTANT_SERIALIZER = next(m for m in typing.get_args(Instant)[1:] if isinstance(m, PlainSerializer))


def test_every_time_in_a_response_model_is_an_instant(app) -> None:
    models = _response_models(app)
    assert len(models) >= 10  # a broken route scan would find none and pass vacuously
    seen: set[type] = set()
    offenders = [w for model in sorted(models, key=lambda m: m.__name__)
                 for w in _bare_datetimes(model, [], model.__name__, seen)]
    assert not offenders, "datetime fields not typed Instant:\n" + "\n".join(offenders)


def test_the_instant_check_finds_a_plain_datetime() -> None:
    class Inner(BaseModel):
        at: datetime | None
        aware: AwareDatetime

    class Outer(BaseModel):
        ok: Instant
        maybe: Instant | None
        inner: list[Inner]

    assert list(_bare_datetimes(Outer, [], "Outer", set())) == ["Inner.at", "Inner.aware"]


def test_an_instant_is_written_in_utc_ending_in_z() -> None:
    adapter = TypeAdapter(Instant)
    # 09:30 at UTC+02:00 is 07:30 UTC (worked by hand).
    plus_two = datetime(2026, 3, 2, 9, 30, tzinfo=timezone(timedelta(hours=2)))
    assert adapter.dump_python(plus_two, mode="json") == "2026-03-02T07:30:00Z"
    assert adapter.dump_python(datetime(2026, 3, 2, 7, 30, 0, 250_000, tzinfo=UTC), mode="json") == (
        "2026-03-02T07:30:00.250000Z"
    )
    with pytest.raises(ValidationError):
        adapter.validate_python(datetime(2026, 3, 2, 7, 30))  # naive: no instant to convert


def _resolve(document: dict[str, Any], schema: dict[str, Any]) -> dict[str, Any]:
    return document["components"]["schemas"][schema["$ref"].removeprefix(REF_PREFIX)]


def test_a_metrics_period_has_required_integer_counts_and_described_fields(document: dict[str, Any]) -> None:
    get = document["paths"]["/v1/models/{model}/metrics"]["get"]
    body = _resolve(document, get["responses"]["200"]["content"]["application/json"]["schema"])
    period = _resolve(document, body["properties"]["periods"]["items"])
    for key in PERIOD_COUNTS:
        assert period["properties"][key]["type"] == "integer", key
        assert key in period["required"], key
    # log_loss has an interval, psi has none (listed by hand, not read from the code).
    assert "log_loss_ci" in period["properties"]
    assert "psi" in period["properties"]
    assert "psi_ci" not in period["properties"]
    assert "window_start" not in period["required"]
    undescribed = [name for name, prop in period["properties"].items() if not prop.get("description")]
    assert not undescribed, undescribed
    status = _resolve(document, period["properties"]["status"]["additionalProperties"])
    assert set(status["properties"]["state"]["enum"]) == {"measured", "too_few_cases", "no_value"}


def test_alarms_and_crossings_state_their_version_scope(document: dict[str, Any]) -> None:
    schemas = document["components"]["schemas"]
    for name in ("AlarmOut", "BacktestCrossing"):
        props = schemas[name]["properties"]
        assert set(props["scope"]["enum"]) == {"version", "all_versions"}, name
        assert {"type": "null"} in props["version"]["anyOf"], name
    stream = schemas["ChartStreamOut"]["properties"]
    assert {"cusum_statistic", "control_limit", "watermark_at"} <= set(stream)
