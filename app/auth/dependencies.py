"""``Authorization: Bearer <key>`` dependencies returning the caller as a ``Principal``.

401 means no valid key (missing, unknown or revoked); 403 means a valid key whose role
may not do this.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass
from typing import Annotated

from fastapi import Depends, HTTPException, status
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from app.auth.keys import ROLES, find_active_credentials, needs_touch, touch_key
from app.db import SessionDep, utcnow

# Log lines name keys by id, never by any part of the secret.
logger = logging.getLogger(__name__)

bearer_scheme = HTTPBearer(
    auto_error=False,
    description="An API key: `Authorization: Bearer <key>`. "
    "Admins create keys with `spatline keys create`.",
)


@dataclass(frozen=True, slots=True)
class Principal:
    """Who is calling. ``device_id`` and ``station_pk`` are set for device keys only."""

    role: str
    key_id: int
    label: str
    device_id: str | None = None
    station_pk: int | None = None


def _unauthorized(detail: str) -> HTTPException:
    return HTTPException(
        status_code=status.HTTP_401_UNAUTHORIZED,
        detail=detail,
        headers={"WWW-Authenticate": "Bearer"},
    )


def authenticate(
    session: SessionDep,
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(bearer_scheme)],
) -> Principal:
    if credentials is None or not credentials.credentials:
        raise _unauthorized("An API key is required: send 'Authorization: Bearer <key>'.")
    key = find_active_credentials(session=session, plaintext=credentials.credentials)
    if key is None:
        logger.info("refused a request with an unknown or revoked API key")
        raise _unauthorized("The API key is unknown or has been revoked.")
    if key.device_id is not None:
        if not key.device_found or key.device_revoked:
            logger.info("refused API key %d: its device is revoked", key.id)
            raise _unauthorized("The device of this API key has been revoked.")
        principal = Principal(
            role=key.role,
            key_id=key.id,
            label=key.label,
            device_id=key.device_id,
            station_pk=key.station_pk,
        )
    else:
        principal = Principal(role=key.role, key_id=key.id, label=key.label)
    now = utcnow()
    if needs_touch(key, now):
        # End the read first so that the UPDATE starts its own write transaction; on
        # SQLite upgrading a read snapshot to a write can fail instead of waiting.
        session.commit()
        touch_key(session=session, key_id=key.id, now=now)
        session.commit()
    return principal


def require_role(*roles: str) -> Callable[..., Principal]:
    """A dependency admitting keys of the given roles, e.g. ``require_role("admin", "viewer")``."""
    unknown = set(roles) - set(ROLES)
    if not roles or unknown:
        raise ValueError(f"roles must be among {ROLES}; got {roles!r}")
    allowed = ", ".join(roles)

    # async: a check without I/O runs on the event loop instead of costing a thread hop.
    async def dependency(principal: Annotated[Principal, Depends(authenticate)]) -> Principal:
        if principal.role not in roles:
            logger.info(
                "refused API key %d (%s): needs %s", principal.key_id, principal.role, allowed
            )
            raise HTTPException(
                status_code=status.HTTP_403_FORBIDDEN,
                detail=f"A key with role '{principal.role}' may not do this; "
                f"it needs one of: {allowed}.",
            )
        return principal

    dependency.__name__ = f"require_{'_or_'.join(roles)}"
    return dependency


async def require_device(principal: Annotated[Principal, Depends(authenticate)]) -> Principal:
    """Admit device keys only; the principal carries the device's station.

    async because it does no I/O: FastAPI runs a sync dependency in the thread pool, and
    that hop costs more than the check.
    """
    if principal.role != "device" or principal.station_pk is None:
        raise HTTPException(
            status_code=status.HTTP_403_FORBIDDEN,
            detail="Only a device key may post readings; create one with "
            "POST /api/v1/sites/{site_id}/stations/{station_id}/devices.",
        )
    return principal


AdminDep = Annotated[Principal, Depends(require_role("admin"))]
ReaderDep = Annotated[Principal, Depends(require_role("admin", "viewer"))]
DeviceDep = Annotated[Principal, Depends(require_device)]
