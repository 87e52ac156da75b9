"""Which webhook URLs may be called: checked at registration and on the resolved address at send time.

A webhook makes the service send requests to an address a user chose, so it
must not become a way to reach what only the server can reach (server-side
request forgery). Link-local and cloud metadata addresses are always refused,
because they hand out credentials; private and loopback addresses are refused
unless ``CALIBRANT_WEBHOOK_ALLOW_PRIVATE`` is set (tests, demos, targets on the
same private network). Every address a name resolves to must pass, so a DNS
answer that mixes a public and a refused address is refused.
"""

from __future__ import annotations

import ipaddress
import socket
from collections.abc import Callable
from dataclasses import dataclass
from urllib.parse import urlsplit

IPAddress = ipaddress.IPv4Address | ipaddress.IPv6Address
# (host, port) -> the IP addresses it resolves to, as text. Injected in tests.
Resolver = Callable[[str, int], list[str]]

MAX_URL_LENGTH = 2000

# Always refused, even with private targets allowed: metadata services of the
# large clouds and the ranges that hold them.
_ALWAYS_REFUSED_NETWORKS = tuple(
    ipaddress.ip_network(n)
    for n in (
        "169.254.0.0/16",  # IPv4 link-local; 169.254.169.254 is the metadata service of most clouds
        "fe80::/10",  # IPv6 link-local
        "100.100.100.200/32",  # Alibaba Cloud metadata
        "fd00:ec2::254/128",  # AWS metadata over IPv6
        "168.63.129.16/32",  # Azure host services (wire server)
        "0.0.0.0/8",  # "this network"; 0.0.0.0 reaches the local host on many systems
    )
)
_ALWAYS_REFUSED_NAMES = frozenset({"metadata.google.internal", "metadata.goog", "metadata"})


class TargetRefused(ValueError):
    """The URL, or an address its host resolves to, may not be a webhook target."""


@dataclass(frozen=True, slots=True)
class CheckedTarget:
    """A URL that passed, with the address to connect to (pinned, so DNS cannot change it later)."""

    scheme: str
    host: str
    port: int
    address: str


def system_resolver(host: str, port: int) -> list[str]:
    """Every address the operating system resolves ``host`` to."""
    infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    return sorted({str(info[4][0]) for info in infos})


def address_refusal(address: IPAddress, *, allow_private: bool) -> str | None:
    """Why ``address`` may not be called, or None if it may."""
    if isinstance(address, ipaddress.IPv6Address) and address.ipv4_mapped is not None:
        address = address.ipv4_mapped  # ::ffff:169.254.169.254 is 169.254.169.254
    if any(address in network for network in _ALWAYS_REFUSED_NETWORKS):
        return f"{address} is a link-local or cloud metadata address"
    if address.is_multicast or address.is_unspecified:
        return f"{address} is not a unicast host address"
    if address.is_loopback:  # before is_reserved: Python counts ::1 as reserved too
        return None if allow_private else (
            f"{address} is a loopback address (set CALIBRANT_WEBHOOK_ALLOW_PRIVATE=true to allow)"
        )
    if address.is_reserved:
        return f"{address} is in a reserved range"
    if allow_private:
        return None
    if address.is_private or not address.is_global:
        return f"{address} is a private address (set CALIBRANT_WEBHOOK_ALLOW_PRIVATE=true to allow)"
    return None


def check_url(url: str) -> tuple[str, str, int]:
    """(scheme, host, port) of a well-formed http(s) URL; no address checks yet."""
    if len(url) > MAX_URL_LENGTH:
        raise TargetRefused(f"the URL is longer than {MAX_URL_LENGTH} characters")
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError as exc:
        raise TargetRefused(f"not a valid URL: {exc}") from None
    scheme = parts.scheme.lower()
    if scheme not in {"http", "https"}:
        raise TargetRefused("only http and https URLs can be webhook targets")
    if parts.username is not None or parts.password is not None:
        raise TargetRefused("credentials in the URL are not accepted; put a token in the path instead")
    host = (parts.hostname or "").rstrip(".")
    if not host:
        raise TargetRefused("the URL has no host")
    return scheme, host, port or (443 if scheme == "https" else 80)


def check_target(url: str, *, allow_private: bool, resolver: Resolver) -> CheckedTarget:
    """Check ``url`` and every address its host resolves to; raise TargetRefused if any fails."""
    scheme, host, port = check_url(url)
    if host.lower() in _ALWAYS_REFUSED_NAMES:
        raise TargetRefused(f"{host} is a cloud metadata service")
    literal = _ip_literal(host)
    addresses = [literal] if literal is not None else _resolve(host, port, resolver)
    for address in addresses:
        reason = address_refusal(address, allow_private=allow_private)
        if reason is not None:
            prefix = "" if literal is not None else f"{host} resolves to a refused address: "
            raise TargetRefused(prefix + reason)
    return CheckedTarget(scheme=scheme, host=host, port=port, address=str(addresses[0]))


def _ip_literal(host: str) -> IPAddress | None:
    try:
        return ipaddress.ip_address(host)
    except ValueError:
        return None


def _resolve(host: str, port: int, resolver: Resolver) -> list[IPAddress]:
    try:
        resolved = resolver(host, port)
    except OSError as exc:
        raise TargetRefused(f"{host} does not resolve: {exc}") from None
    if not resolved:
        raise TargetRefused(f"{host} does not resolve to any address")
    # A scope suffix (fe80::1%eth0) is not part of the address itself.
    return [ipaddress.ip_address(a.split("%", 1)[0]) for a in resolved]
