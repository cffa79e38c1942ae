"""One-line plain-language readings of sensitivity numbers.

The thresholds are conventions of this report, not published cut-offs (common
practice, no source): a total index below 0.01 counts as negligible; an interaction
share (ST - S1) above 0.1 is worth mentioning; an interval wider than 0.1 means the
estimate is rough; a KS p-value below 0.05 counts as a difference, and its size is
read from the KS distance: below 0.1 slight, 0.1 to 0.3 moderate, 0.3 or more strong.
The report states them next to the tables that use them (`PRIORITY_RULES`,
`KS_RULES`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .tables import exact_number

__all__ = ["NEGLIGIBLE_ST", "INTERACTION_NOTE", "SLIGHT_KS", "LARGE_KS", "KS_ALPHA",
           "PRIORITY_RULES", "KS_RULES", "Index", "priority_reading", "regional_reading",
           "ks_strength", "fmt_value"]

NEGLIGIBLE_ST = 0.01
INTERACTION_NOTE = 0.1
KS_ALPHA = 0.05
SLIGHT_KS = 0.1
LARGE_KS = 0.3

PRIORITY_RULES = (
    f"Readings: ST below {NEGLIGIBLE_ST:g} counts as negligible; S1 counts as "
    "indistinguishable from zero when its 95 % interval contains zero; an interaction share "
    f"ST - S1 above {INTERACTION_NOTE:g} is mentioned. These cut-offs are this report's "
    "conventions (common practice, no published source).")

KS_RULES = (
    f"Readings: a p-value of {KS_ALPHA:g} or more counts as no clear difference; otherwise a "
    f"KS distance below {SLIGHT_KS:g} is read as slight, {SLIGHT_KS:g} to {LARGE_KS:g} as "
    f"moderate and {LARGE_KS:g} or more as strong. With many sets even a slight difference "
    "has a small p-value. These cut-offs are this report's conventions (common practice, "
    "no published source).")


def fmt_value(value) -> str:
    """A parameter value at full precision (shortest text that reads back the same)."""
    try:
        return exact_number(value)
    except (TypeError, ValueError, OverflowError):
        return str(value)


@dataclass(frozen=True)
class Index:
    """A Sobol index with its 95 % interval (NaN where unknown)."""

    value: float
    lo: float = math.nan
    hi: float = math.nan

    @property
    def known(self) -> bool:
        return not math.isnan(self.value)

    @property
    def has_interval(self) -> bool:
        return not (math.isnan(self.lo) or math.isnan(self.hi))

    def zero_inside(self) -> bool:
        """The interval contains zero (the index is indistinguishable from zero)."""
        return self.has_interval and self.lo <= 0.0 <= self.hi

    def below_zero(self) -> bool:
        """The whole interval lies below zero: impossible for a variance share."""
        return self.has_interval and self.hi < 0.0


def _percent(x: float) -> str:
    return f"{max(x, 0.0) * 100:.0f} %"


def _interval_text(index: Index) -> str:
    return f"[{index.lo:.2f}, {index.hi:.2f}]"


def priority_reading(s1: Index, st: Index, *, nominal=None, rough: bool = False,
                     overlaps: tuple[int, ...] = ()) -> str:
    """What measuring one parameter would do for one claim.

    Parameters
    ----------
    s1, st : Index
        First-order and total Sobol index of the parameter for the claim.
    nominal : float, optional
        The value to fix the parameter at when it barely matters.
    rough : bool
        The interval of either index is wide: say so.
    overlaps : tuple of int
        Ranks (by ST) of the other parameters whose ST interval overlaps this one's:
        the order among them is not settled.
    """
    if not (s1.known and st.known):
        return "No estimate available."
    parts = []
    if st.value < NEGLIGIBLE_ST:
        where = f" ({fmt_value(nominal)})" if nominal is not None else ""
        parts.append(f"Barely matters here: could be fixed at its nominal value{where}.")
    else:
        parts.append(f"Pinning it down matters: about {_percent(st.value)} of the variance "
                     "in whether the claim holds involves it (ST).")
        if s1.below_zero():
            parts.append(f"S1 is negative with an interval {_interval_text(s1)} that excludes "
                         "zero, which a share of variance cannot be: estimator noise or too "
                         "few sets; read it as zero and enlarge the sample.")
        elif s1.zero_inside():
            parts.append(f"Alone it settles little: S1 is indistinguishable from zero "
                         f"({_interval_text(s1)}).")
        else:
            parts.append(f"Known exactly, it alone would remove about {_percent(s1.value)} "
                         "(S1).")
        if st.value - max(s1.value, 0.0) > INTERACTION_NOTE:
            parts.append("Most of its effect comes through interactions with other "
                         "parameters." if st.value - max(s1.value, 0.0) > max(s1.value, 0.0)
                         else "It also acts jointly with other parameters.")
    if overlaps:
        ranks = ", ".join(str(r) for r in overlaps)
        parts.append(f"Its ST interval overlaps those ranked {ranks}: the order among them "
                     "is not settled by this sample.")
    if rough:
        parts.append("Rough estimate: more samples needed.")
    return " ".join(parts)


def ks_strength(ks: float) -> str:
    """'slight', 'moderate' or 'strong' by the KS distance (thresholds above)."""
    if ks >= LARGE_KS:
        return "strong"
    return "moderate" if ks >= SLIGHT_KS else "slight"


def regional_reading(ks: float, p_value: float, median_true: float, median_false: float) -> str:
    """Where in its range a parameter favours the claim, from the KS test."""
    if math.isnan(ks):
        return "Cannot compare: the claim always holds or never holds."
    if p_value >= KS_ALPHA:
        return "No clear difference between sets where the claim holds and where it fails."
    if median_true > median_false:
        side = "higher"
    elif median_true < median_false:
        side = "lower"
    else:
        side = None
    strength = ks_strength(ks)
    if side is None:
        return f"Same median, but the spread differs ({strength} difference)."
    return f"The claim holds more often at {side} values ({strength} difference)."
