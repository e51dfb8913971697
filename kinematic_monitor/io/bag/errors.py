"""Errors of the bag reader."""

from __future__ import annotations

__all__ = ["BagError"]


class BagError(Exception):
    """The bag cannot be used: unreadable, or a needed topic missing or mistyped."""
