"""Alembic migrations of the vault schema (installed as ``magvault.migrations``)."""
