"""Names poise gives a meaning of its own, in one place.

Words of claims and expressions, the columns of the run's tables, and the
characters a name or title may not hold. Plain constants only (no imports from the
rest of poise), so that any reader — study files, SBML — can check names against
them cheaply.
"""

from __future__ import annotations

import re
import unicodedata

# --- words of claims ----------------------------------------------------------------
STEADY_FLAGS = ("stable", "unstable", "undetermined", "node", "focus", "saddle", "complex_eigenvalues")
STEADY_NUMBERS = ("margin",)
AGGREGATORS = ("any", "all", "none", "count")
CONSTANTS = ("inf", "nan", "pi")
# long-run behaviour (simulation): values of a whole parameter set, and calls
LONG_RUN_NAMES = ("cycles", "period")
LONG_RUN_CALLS = ("amplitude", "reaches", "basin")
# words that were renamed: old word -> new word (the old one is refused, naming the new)
RENAMED = {"oscillatory": "complex_eigenvalues"}
CLAIM_WORDS = frozenset(STEADY_FLAGS + STEADY_NUMBERS + AGGREGATORS + CONSTANTS + LONG_RUN_NAMES
                        + LONG_RUN_CALLS + tuple(RENAMED))

# --- columns of the run's tables (docs/run-output.md, the run directory) ---------------
# samples.parquet and outcomes.parquet: one row per parameter set (plus one column per
# uncertain parameter, and per claim in outcomes.parquet)
SET_COLUMNS = ("sample_id", "block", "independent", "status", "reason", "n_steady", "n_stable",
               "long_run", "long_run_reason", "cycles", "period", "n_orbits", "n_trajectories",
               "n_undetermined")
# equilibria.parquet: one row per steady state (plus one column per state and the
# eigenvalue columns eig_re_<i>, eig_im_<i>)
STEADY_STATE_COLUMNS = ("sample_id", "index", "label", "class", "stability", "margin",
                        "complex_eigenvalues", "continuum", "trace", "determinant", "discriminant",
                        "reached", "basin", "basin_low", "basin_high")
# per-state columns of the long-run tables: min(x), max(x), amplitude(x), start(x)
STATE_COLUMN_WORDS = ("min", "max", "amplitude", "start")
EIGENVALUE_COLUMN = re.compile(r"eig_(re|im)_[0-9]+")
TABLE_COLUMNS = frozenset(SET_COLUMNS + STEADY_STATE_COLUMNS)


def is_table_column(name: str) -> bool:
    """Whether `name` is (or may become) a column poise puts in a run's tables; such a
    name cannot be a state or a parameter, whose values get columns of their own."""
    return name in TABLE_COLUMNS or EIGENVALUE_COLUMN.fullmatch(name) is not None


def state_columns(states) -> frozenset:
    """Names of the per-state columns of the long-run tables (``min(x)`` ...): a claim
    may not take one of them as its name."""
    return frozenset(f"{word}({state})" for word in STATE_COLUMN_WORDS for state in states)


# --- characters ---------------------------------------------------------------------
# Text-direction controls (Unicode bidirectional algorithm, UAX #9) make text display
# in another order than it is stored; line and paragraph separators break lines.
_INVISIBLE = frozenset("\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e"
                       "\u2066\u2067\u2068\u2069\u2028\u2029")


def is_hostile_character(char: str, allow_line_breaks: bool = False) -> bool:
    """A control character (Unicode category Cc: C0, DEL, C1), a text-direction
    control or a line separator: printed raw, such characters can clear a terminal,
    fake output or reorder what a reader sees. `allow_line_breaks` admits tab and
    newline (an expression may span lines inside brackets); a carriage return, which
    moves back over what a line already shows, never."""
    if allow_line_breaks and char in "\t\n":
        return False
    return char in _INVISIBLE or unicodedata.category(char) == "Cc"


def visible(text: str) -> str:
    """`text` with every hostile character written as an escape (``\\x1b``, ``\\u202e``)."""
    if not any(is_hostile_character(c) for c in text):
        return text
    return "".join(c.encode("unicode_escape").decode("ascii") if is_hostile_character(c) else c
                   for c in text)
