"""Time helpers: fleet stores naive UTC everywhere."""

from datetime import UTC, datetime


def utcnow() -> datetime:
    """Now as naive UTC, the form every stored time takes."""
    return datetime.now(UTC).replace(tzinfo=None)
