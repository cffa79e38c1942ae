"""One-line plain-language readings of sensitivity numbers.

Thresholds are conventions of this report (common practice, no source): a total
index below 0.01 counts as negligible; an interaction share (ST - S1) above 0.1
is worth mentioning; an interval wider than 0.1 means the estimate is rough;
a KS p-value below 0.05 counts as a difference and a KS distance of 0.3 or more
as a strong one.
"""

from __future__ import annotations

import math

__all__ = ["NEGLIGIBLE_ST", "priority_reading", "regional_reading", "fmt_value"]

NEGLIGIBLE_ST = 0.01
INTERACTION_NOTE = 0.1
LARGE_KS = 0.3


def fmt_value(value) -> str:
    """Short human form of a parameter value."""
    try:
        return format(float(value), ".4g")
    except (TypeError, ValueError):
        return str(value)


def _percent(x: float) -> str:
    return f"{max(x, 0.0) * 100:.0f} %"


def priority_reading(s1: float, st: float, *, nominal=None, rough: bool = False) -> str:
    """What knowing one parameter exactly would do for one claim.

    Parameters
    ----------
    s1, st : float
        First-order and total Sobol index of the parameter for the claim.
    nominal : float, optional
        The value to fix the parameter at when it barely matters.
    rough : bool
        The interval of either index is wide: say so.
    """
    if math.isnan(s1) or math.isnan(st):
        return "No estimate available."
    if st < NEGLIGIBLE_ST:
        where = f" ({fmt_value(nominal)})" if nominal is not None else ""
        text = f"Barely matters here: could be fixed at its nominal value{where}."
    else:
        if s1 >= 0.3:
            lead = "Measure first: knowing it exactly would remove"
        elif s1 >= 0.05:
            lead = "Knowing it exactly would remove"
        else:
            lead = "On its own, knowing it would remove only"
        text = f"{lead} about {_percent(s1)} of the variance in whether the claim holds."
        if st - s1 > INTERACTION_NOTE:
            text += f" It also acts jointly with other parameters (up to {_percent(st)} in all)."
    if rough:
        text += " Rough estimate: more samples needed."
    return text


def regional_reading(ks: float, p_value: float, median_true: float, median_false: float) -> str:
    """Where in its range a parameter favours the claim, from the KS test."""
    if math.isnan(ks):
        return "Cannot compare: the claim always holds or never holds."
    if p_value >= 0.05:
        return "No clear difference between sets where the claim holds and where it fails."
    if median_true > median_false:
        side = "higher"
    elif median_true < median_false:
        side = "lower"
    else:
        side = None
    strength = "strong" if ks >= LARGE_KS else "moderate"
    if side is None:
        return f"Same median, but the spread differs ({strength} effect)."
    return f"The claim holds more often at {side} values ({strength} effect)."
