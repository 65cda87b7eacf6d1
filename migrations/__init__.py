"""Alembic migrations; the only way tables are made."""
