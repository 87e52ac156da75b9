"""The Jinja2 environment of the pages: templates shipped inside the package, HTML autoescaped,
and the few formatting filters the templates share."""

from __future__ import annotations

from datetime import UTC, datetime
from functools import cache
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape


def number(value: float | None, digits: int = 3) -> str:
    if value is None:
        return "—"
    return f"{value:.{digits}f}"


def plain(value: Any) -> str:
    """An evidence value: a fraction to 4 significant places, anything else as it is."""
    if isinstance(value, float):
        return f"{value:.4g}"
    return "—" if value is None else str(value)


def share(value: float | None) -> str:
    return "—" if value is None else f"{value:.0%}"


def _utc_text(value: datetime | str | None, pattern: str) -> str:
    """An instant (or its RFC 3339 text) written in UTC; a dash for none."""
    if value is None:
        return "—"
    when = datetime.fromisoformat(value) if isinstance(value, str) else value  # 3.11 reads "Z"
    return when.astimezone(UTC).strftime(pattern)


def instant(value: datetime | str | None) -> str:
    return _utc_text(value, "%Y-%m-%d %H:%M UTC")


def day(value: datetime | str | None) -> str:
    return _utc_text(value, "%Y-%m-%d")


def rfc3339(value: datetime) -> str:
    return value.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def age(value: datetime | None, now: datetime) -> str:
    """How long ago, in the largest whole unit: '3 h ago', '12 d ago'."""
    if value is None:
        return "never"
    seconds = (now - value).total_seconds()
    if seconds < 0:
        return "in the future"
    for unit, size in (("d", 86_400), ("h", 3600), ("min", 60)):
        if seconds >= size:
            return f"{int(seconds // size)} {unit} ago"
    return "just now"


@cache
def environment() -> Environment:
    env = Environment(
        loader=PackageLoader("calibrant.pages", "templates"),
        autoescape=select_autoescape(["html"]),
        undefined=StrictUndefined,  # a misspelt name fails the page's test instead of printing nothing
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters.update(number=number, share=share, instant=instant, day=day, rfc3339=rfc3339, plain=plain)
    env.globals.update(age=age)
    return env


def render(name: str, context: dict[str, Any]) -> str:
    return environment().get_template(name).render(**context)
