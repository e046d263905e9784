"""The pages' session: a signed cookie that names the API key a person signed in with.

Sign-in takes a team's API key once, from a form; the key itself never goes into the
cookie. The cookie holds the key's *id*, its team, when it was issued and when it
expires, signed with HMAC-SHA256 (the standard library's :mod:`hmac`):

    v1.<base64url(JSON payload)>.<base64url(HMAC-SHA256(secret, "v1." + payload))>

Why the standard library and not a signing package: the format needs one primitive
(HMAC-SHA256, compared in constant time with :func:`hmac.compare_digest`), the expiry
lives inside the signed payload (so it cannot be stretched by the browser or by an
attacker who edits ``Max-Age``), and no new dependency is needed for a dozen lines.

Every page request checks the signature, the expiry, and then reads the key by its id:
a revoked key signs nobody in from the next request on, as over the API. The cookie is
``HttpOnly`` (no script reads it), ``SameSite=Strict`` (no other site's page sends it,
which is what stops cross-site form posts), ``Path=/``, has ``Max-Age`` equal to the
session's life, and is ``Secure`` when the request came over HTTPS.

The signing secret is ``SEQTEST_SESSION_SECRET`` when set; otherwise one is generated
on the first start and kept in the database (table ``service_secrets``), so that every
server process, and every restart, shares it. Changing it signs everybody out.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import hmac
import json
import logging
import secrets
import time
from dataclasses import dataclass
from typing import Any

from sqlalchemy.exc import IntegrityError

from service.db import site
from service.db.engine import Database
from service.errors import Unavailable

log = logging.getLogger("seqtest.service")

COOKIE = "seqtest_session"
VERSION = "v1"
SECRET_NAME = "session_signing_key"
CLOCK_SKEW_S = 300  # a cookie issued this far in the future is still accepted


@dataclass(frozen=True)
class Session:
    """What a valid cookie says."""

    key_id: str
    team_id: str
    issued_at: int
    expires_at: int


class BadCookie(Exception):
    """A cookie that is not ours, was changed, or has expired (``expired``)."""

    def __init__(self, why: str, *, expired: bool = False) -> None:
        super().__init__(why)
        self.expired = expired


def _b64(data: bytes) -> str:
    return base64.urlsafe_b64encode(data).rstrip(b"=").decode("ascii")


def _unb64(text: str) -> bytes:
    return base64.urlsafe_b64decode(text + "=" * (-len(text) % 4))


class Signer:
    """Signs and checks session cookies with one secret."""

    def __init__(self, secret: str, max_age_s: float) -> None:
        if len(secret) < 32:
            raise ValueError("session secret: got fewer than 32 characters; allowed is at "
                             "least 32")
        self._key = hashlib.sha256(b"seqtest session cookie\x00" + secret.encode()).digest()
        self.max_age_s = int(max_age_s)

    def _mac(self, payload: str) -> str:
        return _b64(hmac.new(self._key, f"{VERSION}.{payload}".encode("ascii"),
                             hashlib.sha256).digest())

    def issue(self, key_id: str, team_id: str, *, now: float | None = None) -> str:
        t = int(time.time() if now is None else now)
        body = {"k": key_id, "t": team_id, "iat": t, "exp": t + self.max_age_s}
        payload = _b64(json.dumps(body, separators=(",", ":"), sort_keys=True).encode())
        return f"{VERSION}.{payload}.{self._mac(payload)}"

    def read(self, cookie: str, *, now: float | None = None) -> Session:
        """The session a cookie carries; :class:`BadCookie` when it is forged, changed,
        malformed or expired."""
        t = time.time() if now is None else now
        parts = cookie.split(".")
        if len(parts) != 3 or parts[0] != VERSION or len(cookie) > 2000:
            raise BadCookie("not a session cookie of this service")
        _, payload, mac = parts
        if not hmac.compare_digest(mac.encode("ascii", "replace"),
                                   self._mac(payload).encode("ascii")):
            raise BadCookie("the signature does not match")
        try:
            body: Any = json.loads(_unb64(payload))
        except (ValueError, binascii.Error):
            raise BadCookie("the payload is not readable") from None
        if not isinstance(body, dict) or not all(
            isinstance(body.get(k), str) for k in ("k", "t")
        ) or not all(isinstance(body.get(k), int) for k in ("iat", "exp")):
            raise BadCookie("the payload lacks a field")
        if body["iat"] > t + CLOCK_SKEW_S:
            raise BadCookie("issued in the future")
        if body["exp"] <= t:
            raise BadCookie("expired", expired=True)
        return Session(body["k"], body["t"], body["iat"], body["exp"])


def signing_secret(db: Database, configured: str) -> str:
    """The configured secret, else the one kept in the database (generated and stored
    on the first start; a concurrent first start of another process keeps its own
    and this one reads it). A database that refuses the write (read-only) gets a
    secret for this process alone, with a warning: sessions then end at a restart and
    are not shared between worker processes."""
    if configured:
        return configured
    with db.read() as conn:
        found = site.secret(conn, SECRET_NAME)
    if found:
        return found
    candidate = secrets.token_urlsafe(48)
    try:
        with db.write() as conn:
            found = site.secret(conn, SECRET_NAME)
            if found:
                return found
            site.insert_secret(conn, SECRET_NAME, candidate)
        return candidate
    except IntegrityError:
        with db.read() as conn:
            found = site.secret(conn, SECRET_NAME)
        if found:
            return found
        raise
    except Unavailable as exc:
        log.warning("the pages' session secret could not be stored (%s); using one for "
                    "this process only: set SEQTEST_SESSION_SECRET to share sign-ins "
                    "between processes and restarts", exc.message)
        return candidate
