"""Shared helpers of the input readers: short listings of ids and features for error messages."""

from __future__ import annotations

_MAX_LISTED = 10


def _listing(values, limit: int = _MAX_LISTED) -> str:
    values = [str(v) for v in values]
    head = ", ".join(repr(v) for v in values[:limit])
    more = f" and {len(values) - limit} more" if len(values) > limit else ""
    return head + more


def _feature_names(rows, ids) -> str:
    """Features by 0-based index and id, for a message: ``feature 10 (id 'OST-0011')``."""
    rows = [int(i) for i in rows]
    shown = ", ".join(f"feature {i} (id {ids[i]!r})" for i in rows[:_MAX_LISTED])
    return shown + (f" and {len(rows) - _MAX_LISTED} more" if len(rows) > _MAX_LISTED else "")
