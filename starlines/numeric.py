"""Small helpers for values that may be missing, masked or not numbers at all."""

from __future__ import annotations

import math

__all__ = ["is_finite", "as_float"]


def is_finite(x) -> bool:
    """True when ``x`` converts to a finite float (None, NaN, text and masked give False)."""
    try:
        return math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def as_float(value) -> float | None:
    """``value`` as a finite float, or None (booleans are not numbers here)."""
    if isinstance(value, bool):
        return None
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None
