"""Persistence: the ORM tables of the traceability store."""
