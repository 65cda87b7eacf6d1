"""Creating, finding and revoking API keys.

A key is ``spl_`` followed by 43 URL-safe characters (32 random bytes from ``secrets``).
Only its SHA-256 is stored, so a copied database does not give anyone a working key.
The plaintext is returned once, by ``create_key``, and never logged.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import hmac
import logging
import secrets
from dataclasses import dataclass

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from app.auth.models import ApiKey
from app.db import utcnow
from app.sites.models import Device

KEY_PREFIX = "spl_"
KEY_RANDOM_BYTES = 32
ROLES = ("admin", "viewer", "device")
logger = logging.getLogger(__name__)

# Writing last_used_at on every request would turn every read into a write.
LAST_USED_RESOLUTION = dt.timedelta(minutes=1)


def hash_key(plaintext: str) -> str:
    return hashlib.sha256(plaintext.encode("utf-8")).hexdigest()


def generate_key() -> str:
    return KEY_PREFIX + secrets.token_urlsafe(KEY_RANDOM_BYTES)


def create_key(
    *, session: Session, role: str, label: str, device_id: str | None = None
) -> tuple[ApiKey, str]:
    """Add a new key to the session and return it with its plaintext (shown once)."""
    if role not in ROLES:
        raise ValueError(f"role must be one of {', '.join(ROLES)}; got {role!r}")
    if (role == "device") != (device_id is not None):
        raise ValueError("a device key needs a device_id, and only a device key may have one")
    plaintext = generate_key()
    api_key = ApiKey(
        key_hash=hash_key(plaintext),
        prefix=plaintext[:8],
        role=role,
        label=label,
        device_id=device_id,
        created_at=utcnow(),
    )
    session.add(api_key)
    session.flush()
    logger.info(
        "created %s API key %d (%s)%s",
        role,
        api_key.id,
        label,
        f" for device {device_id}" if device_id else "",
    )
    return api_key, plaintext


def find_active_key(*, session: Session, plaintext: str) -> ApiKey | None:
    """The unrevoked key whose hash matches ``plaintext``, or None."""
    digest = hash_key(plaintext)
    api_key = session.scalars(select(ApiKey).where(ApiKey.key_hash == digest)).one_or_none()
    # The lookup goes through an index on the digest; the final comparison is constant-time
    # so that no timing difference depends on how much of a guess matched.
    if api_key is None or not hmac.compare_digest(api_key.key_hash, digest):
        return None
    if api_key.revoked_at is not None:
        return None
    return api_key


@dataclass(frozen=True, slots=True)
class KeyCredentials:
    """What a request needs to know about its key, and the key's device if it has one."""

    id: int
    role: str
    label: str
    last_used_at: dt.datetime | None
    device_id: str | None
    device_found: bool
    device_revoked: bool
    station_pk: int | None


def find_active_credentials(*, session: Session, plaintext: str) -> KeyCredentials | None:
    """The unrevoked key matching ``plaintext`` with its device, in one query; or None.

    Every API request runs this: one round trip (the key and its device joined, as plain
    columns) instead of a key object and then a device object.
    """
    digest = hash_key(plaintext)
    row = session.execute(
        select(
            ApiKey.id,
            ApiKey.key_hash,
            ApiKey.role,
            ApiKey.label,
            ApiKey.revoked_at,
            ApiKey.last_used_at,
            ApiKey.device_id,
            Device.id.label("found_device_id"),
            Device.revoked_at.label("device_revoked_at"),
            Device.station_pk,
        )
        .outerjoin(Device, Device.id == ApiKey.device_id)
        .where(ApiKey.key_hash == digest)
    ).one_or_none()
    # As in find_active_key: the final comparison is constant-time.
    if row is None or not hmac.compare_digest(row.key_hash, digest):
        return None
    if row.revoked_at is not None:
        return None
    return KeyCredentials(
        id=row.id,
        role=row.role,
        label=row.label,
        last_used_at=row.last_used_at,
        device_id=row.device_id,
        device_found=row.found_device_id is not None,
        device_revoked=row.device_revoked_at is not None,
        station_pk=row.station_pk,
    )


def touch_key(*, session: Session, key_id: int, now: dt.datetime | None = None) -> None:
    """Record that the key was used (one UPDATE; the caller commits)."""
    session.execute(update(ApiKey).where(ApiKey.id == key_id).values(last_used_at=now or utcnow()))


def needs_touch(api_key: ApiKey | KeyCredentials, now: dt.datetime) -> bool:
    return api_key.last_used_at is None or now - api_key.last_used_at >= LAST_USED_RESOLUTION


def list_keys(*, session: Session) -> list[ApiKey]:
    return list(session.scalars(select(ApiKey).order_by(ApiKey.id)))


def revoke_key(*, session: Session, key_id: int) -> ApiKey | None:
    """Revoke a key (idempotent). None when no key has that id."""
    api_key = session.get(ApiKey, key_id)
    if api_key is None:
        return None
    if api_key.revoked_at is None:
        api_key.revoked_at = utcnow()
        logger.info("revoked API key %d (%s)", api_key.id, api_key.label)
    return api_key


def revoke_device_keys(*, session: Session, device_id: str) -> None:
    session.execute(
        update(ApiKey)
        .where(ApiKey.device_id == device_id, ApiKey.revoked_at.is_(None))
        .values(revoked_at=utcnow())
    )
