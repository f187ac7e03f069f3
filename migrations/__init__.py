"""Alembic environment and versions of the epoch-assay schema."""
