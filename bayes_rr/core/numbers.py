"""Numbers printed with the digits their interval needs: enough decimals that an
interval's two ends read apart (a limit of 10.046 is not printed as 10.05), and no more
than two significant digits of the interval's width."""

from __future__ import annotations

import math

MAX_DECIMALS = 8


def decimals_for(lower: float | None, upper: float | None, fallback: int = 3) -> int:
    """Decimals that show two significant digits of the width ``upper - lower``."""
    if lower is None or upper is None or not (math.isfinite(lower) and math.isfinite(upper)):
        return fallback
    width = abs(upper - lower)
    if width == 0:
        return fallback
    return min(max(1 - math.floor(math.log10(width)), 0), MAX_DECIMALS)


def fixed(value: float | None, decimals: int) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    return f"{value:,.{decimals}f}" if abs(value) >= 10_000 else f"{value:.{decimals}f}"


def interval_text(mean, lower, upper, fallback: int = 3) -> str:
    """``mean (lower to upper)`` with the digits the interval needs."""
    d = decimals_for(lower, upper, fallback)
    return f"{fixed(mean, d)} ({fixed(lower, d)} to {fixed(upper, d)})"
