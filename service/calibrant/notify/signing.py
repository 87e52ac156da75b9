"""Standard Webhooks signatures (https://www.standardwebhooks.com, spec v1).

A message carries three headers: ``webhook-id`` (the same on every retry of
one message), ``webhook-timestamp`` (integer Unix seconds of the attempt) and
``webhook-signature``: ``v1,`` followed by the base64 HMAC-SHA256 of
``"{id}.{timestamp}.{body}"``, keyed with the bytes that the secret's base64
part (after ``whsec_``) decodes to.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import secrets

SECRET_PREFIX = "whsec_"  # noqa: S105 — the scheme's fixed prefix, not a secret
SECRET_BYTES = 32  # the scheme asks for 24 to 64 random bytes


def new_secret() -> str:
    """A fresh ``whsec_<base64>`` signing secret."""
    return SECRET_PREFIX + base64.b64encode(secrets.token_bytes(SECRET_BYTES)).decode()


def new_message_id() -> str:
    """A unique ``webhook-id``; random, so it reveals nothing about volumes."""
    return "msg_" + secrets.token_hex(16)


def _key(secret: str) -> bytes:
    if not secret.startswith(SECRET_PREFIX):
        raise ValueError("a signing secret starts with 'whsec_'")
    return base64.b64decode(secret.removeprefix(SECRET_PREFIX), validate=True)


def signature(secret: str, message_id: str, timestamp: int, body: bytes) -> str:
    """The ``webhook-signature`` value (one ``v1`` signature)."""
    signed = f"{message_id}.{timestamp}.".encode() + body
    digest = hmac.new(_key(secret), signed, hashlib.sha256).digest()
    return "v1," + base64.b64encode(digest).decode()


def headers(secret: str, message_id: str, timestamp: int, body: bytes) -> dict[str, str]:
    """Every header an attempt sends, the three signature headers included."""
    return {
        "content-type": "application/json",
        "webhook-id": message_id,
        "webhook-timestamp": str(timestamp),
        "webhook-signature": signature(secret, message_id, timestamp, body),
    }
