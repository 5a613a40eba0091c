"""Shared helpers of the input readers: short listings of ids for error messages."""

from __future__ import annotations

_MAX_LISTED = 10


def _listing(values, limit: int = _MAX_LISTED) -> str:
    values = [str(v) for v in values]
    head = ", ".join(repr(v) for v in values[:limit])
    more = f" and {len(values) - limit} more" if len(values) > limit else ""
    return head + more
