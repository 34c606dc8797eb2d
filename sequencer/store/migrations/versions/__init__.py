"""Revisions, oldest first: 0001 initial schema, 0002 annotations + append-only guards."""
