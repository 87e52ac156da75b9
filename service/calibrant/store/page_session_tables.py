"""Sign-in sessions of the read-only pages: only a hash of each cookie's token is kept."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Index, Integer, String
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base


class PageSession(Base):
    """A browser signed in with a key: the pages (never the API) accept its cookie until it expires.

    The session names the key it was opened with, so revoking the key ends the session too,
    and a key limited to one model gives a session limited to that model.
    """

    __tablename__ = "page_sessions"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    token_hash: Mapped[str] = mapped_column(String(64), unique=True)  # SHA-256 hex of the cookie's token
    key_id: Mapped[str] = mapped_column(String(32))
    created_at: Mapped[datetime]
    expires_at: Mapped[datetime]

    __table_args__ = (Index(None, "expires_at"),)
