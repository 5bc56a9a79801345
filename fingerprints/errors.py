"""Errors raised by the fingerprints package (only for caller mistakes, never for SQL text)."""

from __future__ import annotations


class FingerprintError(ValueError):
    """A bad argument, such as an unknown dialect name."""
