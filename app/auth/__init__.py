"""API keys and the role dependencies (admin, viewer, device)."""

from app.auth.dependencies import (
    AdminDep,
    DeviceDep,
    Principal,
    ReaderDep,
    require_device,
    require_role,
)
from app.auth.keys import create_key, hash_key, revoke_key

__all__ = [
    "AdminDep",
    "DeviceDep",
    "Principal",
    "ReaderDep",
    "create_key",
    "hash_key",
    "require_device",
    "require_role",
    "revoke_key",
]
