"""Numbers printed with the digits their interval needs (issue: limits 0.001 apart around
10.05 must read apart; common practice: show two significant digits of an interval's
width, so both its ends read apart)."""

from __future__ import annotations

import pytest

from bayes_rr.core.numbers import decimals_for, interval_text
from bayes_rr.report.answer import _limits_lead


@pytest.mark.parametrize(
    ("mean", "lower", "upper", "text"),
    [
        (10.0495, 10.0490, 10.0500, "10.0495 (10.0490 to 10.0500)"),
        (10.046, 10.0431, 10.0489, "10.0460 (10.0431 to 10.0489)"),
        (0.0123, 0.004, 0.031, "0.012 (0.004 to 0.031)"),
        (412.3, 210.2, 615.9, "412 (210 to 616)"),
    ],
)
def test_interval_ends_read_apart(mean, lower, upper, text):
    assert interval_text(mean, lower, upper) == text
    decimals = decimals_for(lower, upper)
    assert f"{lower:.{decimals}f}" != f"{upper:.{decimals}f}"


def test_call_curve_limits_0001_apart_read_apart_in_the_report():
    rows = []
    for name, limit in (("Ana", 10.049), ("Ben", 10.050), ("Cy", 10.051)):
        for key, value in (("effective_limit[side=upper]", limit),
                           ("bias[side=upper]", limit - 10.05)):  # fmt: skip
            rows.append({"key": key, "scope": "study", "level": "appraiser", "appraiser": name,
                         "part": None, "mean": value, "lower": value - 0.0004,
                         "upper": value + 0.0004})  # fmt: skip
    summary = {"estimands": rows, "prob": 0.95,
               "design": {"appraiser_names": ["Ana", "Ben", "Cy"]}}  # fmt: skip
    html = _limits_lead(summary)
    for text in ("10.04900 (10.04860 to 10.04940)", "10.05000", "10.05100"):
        assert text in html
    assert "10.05 (" not in html
