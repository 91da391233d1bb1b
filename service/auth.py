"""Optional bearer tokens, and which caller owns a run: one FastAPI dependency.

Off by default on loopback, where only local processes can reach the server. Required when
tokens are configured (``TAILGAUGE_TOKENS``, comma-separated, and/or ``TAILGAUGE_TOKEN_FILE``,
one per line) or the server listens beyond loopback; such a server refuses to start without
tokens unless ``TAILGAUGE_AUTH=off`` says the network in front of it does the job.
``TAILGAUGE_AUTH=on`` requires tokens everywhere.

Every computing and runs route depends on ``authenticate`` (installed once, on the routers in
``create_app``); health and metrics stay open for probes and scrapers. A run's owner is the
SHA-256 hex digest of the token that created it: the store never holds a token, and runs are
listed, read and cancelled by their owner only (another token's run answers 404, as an
unknown one does, so ids of other callers' runs cannot be probed). Tokens are compared as
digests with ``hmac.compare_digest`` against every configured one, and never logged: they
live in ``SecretStr`` settings and in this module's digests only.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
from dataclasses import dataclass
from typing import Annotated, Any

from fastapi import Depends, HTTPException, Request

from service.errors import detail_entry
from service.routes.responses import ErrorBody
from service.settings import Settings

REALM = "tailgauge"
_LOOPBACK_NAMES = {"localhost", "localhost.localdomain", "ip6-localhost"}


AUTH_RESPONSES: dict[int | str, dict[str, Any]] = {
    401: {"model": ErrorBody, "description": "Authentication is on and the request has no "
          "accepted bearer token (see the WWW-Authenticate header)."},
}


class AuthConfigError(Exception):
    """The authentication settings cannot work; the message is the one line to show."""


@dataclass(frozen=True)
class AuthConfig:
    enabled: bool
    digests: tuple[str, ...] = ()


@dataclass(frozen=True)
class Caller:
    """Who sent the request: ``owner`` is the token's digest, None while auth is off."""

    owner: str | None


def token_digest(token: str) -> str:
    # Tokens are long random secrets, so a plain (unsalted, fast) digest is enough to keep the
    # store from holding them; it is not a password hash.
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def is_loopback(host: str) -> bool:
    if host.strip("[]").lower() in _LOOPBACK_NAMES:
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:  # a host name other than localhost: assume it is reachable
        return False


def _configured_tokens(settings: Settings) -> list[str]:
    tokens = [] if settings.tokens is None else settings.tokens.get_secret_value().split(",")
    if settings.token_file is not None:
        try:
            text = settings.token_file.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            reason = exc.strerror if isinstance(exc, OSError) else "not UTF-8 text"
            raise AuthConfigError(f"token file {settings.token_file}: {reason}") from None
        tokens += [line.split("#", 1)[0] for line in text.splitlines()]
    return [token.strip() for token in tokens if token.strip()]


def load_auth(settings: Settings) -> AuthConfig:
    tokens = _configured_tokens(settings)
    if settings.auth == "off":
        return AuthConfig(enabled=False)
    enabled = settings.auth == "on" or bool(tokens) or not is_loopback(settings.host)
    if enabled and not tokens:
        why = "TAILGAUGE_AUTH=on" if settings.auth == "on" else (
            f"the server listens on {settings.host}, beyond loopback")
        raise AuthConfigError(
            f"bearer tokens are required ({why}) but none are configured: set "
            "TAILGAUGE_TOKENS or TAILGAUGE_TOKEN_FILE, or TAILGAUGE_AUTH=off to serve without "
            "authentication"
        )
    return AuthConfig(enabled=enabled, digests=tuple(sorted({token_digest(t) for t in tokens})))


def _unauthorized(msg: str, type_: str, error: str | None) -> HTTPException:
    challenge = f'Bearer realm="{REALM}"' + ("" if error is None else f', error="{error}"')
    return HTTPException(
        401, detail=[detail_entry(["header", "Authorization"], msg, type_)],
        headers={"WWW-Authenticate": challenge},
    )


def authenticate(request: Request) -> Caller:
    """The caller of a request (401 when a token is required and missing or unknown)."""
    config: AuthConfig = request.app.state.auth
    if not config.enabled:
        return Caller(owner=None)
    header = request.headers.get("authorization")
    if header is None:
        raise _unauthorized("a bearer token is required (Authorization: Bearer <token>)",
                            "not_authenticated", None)
    scheme, _, token = header.partition(" ")
    token = token.strip()
    if scheme.lower() != "bearer" or not token:
        raise _unauthorized("expected 'Authorization: Bearer <token>'", "not_authenticated",
                            "invalid_request")
    digest = token_digest(token)
    known = False
    for candidate in config.digests:  # no early exit: the time does not depend on which
        known |= hmac.compare_digest(digest, candidate)
    if not known:
        raise _unauthorized("the bearer token is not accepted by this server", "invalid_token",
                            "invalid_token")
    return Caller(owner=digest)


CallerDep = Annotated[Caller, Depends(authenticate)]
