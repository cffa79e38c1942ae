"""Poise names for SBML ids.

SBML ids may clash with what poise expressions reserve (function names, claim
words, columns of the run's tables, Python keywords) and may use forms poise does
not accept (a leading underscore, double underscores). Such ids get a new name; every other global id is
kept as it is. Renaming rules (documented for users in `poise.sbml`):

- invalid characters: leading underscores are dropped, runs of underscores become
  one, a leading digit gets the prefix ``x``;
- a reserved word or a table column (``status``, ``eig_re_1``) gets the suffix
  ``_``; any remaining clash the suffix ``_2``, ``_3``, ...;
- a kinetic law's local parameter ``p`` of reaction ``R`` is named ``R_p``
  (same clash rules).
"""

from __future__ import annotations

import keyword
import re

from poise.study.expressions import FUNCTIONS
from poise.study.vocabulary import CLAIM_WORDS, TABLE_COLUMNS, is_table_column

_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")

# Words poise expressions and claims give a meaning of their own, the columns of a
# run's tables (a parameter called `status` would overwrite that column), and the
# constants `e` and `center` that readers of a model would take for something else.
RESERVED = FUNCTIONS | CLAIM_WORDS | TABLE_COLUMNS | frozenset({"center", "e"})


def is_usable(name: str) -> bool:
    """Whether ``name`` can be a poise state or parameter name as it stands."""
    return (bool(_NAME.match(name)) and "__" not in name and not keyword.iskeyword(name)
            and name not in RESERVED and not is_table_column(name))


def _clean(name: str) -> str:
    cleaned = re.sub(r"_+", "_", re.sub(r"[^A-Za-z0-9_]", "_", name)).lstrip("_")
    if not cleaned or not cleaned[0].isalpha():
        cleaned = "x" + cleaned
    if keyword.iskeyword(cleaned) or cleaned in RESERVED or is_table_column(cleaned):
        cleaned += "_"
    return cleaned


class NameTable:
    """Hands out unique poise names; ids that are usable keep their name."""

    def __init__(self, keep: list[str]):
        self.taken: set[str] = {name for name in keep if is_usable(name)}

    def fresh(self, wanted: str) -> str:
        """A unique usable name close to ``wanted`` (which may already be taken by itself)."""
        base = _clean(wanted)
        if base not in self.taken:
            self.taken.add(base)
            return base
        stem = base.rstrip("_")
        k = 2
        while f"{stem}_{k}" in self.taken:
            k += 1
        self.taken.add(f"{stem}_{k}")
        return f"{stem}_{k}"


def assign_names(global_ids: list[str],
                 local_ids: list[tuple[str, str]]) -> tuple[dict[str, str], dict[tuple[str, str], str]]:
    """Poise names for global ids and for (reaction id, local parameter id) pairs.

    Returns
    -------
    global_names : dict
        SBML id -> poise name.
    local_names : dict
        (reaction id, parameter id) -> poise name ``<reaction>_<parameter>``.
    """
    table = NameTable(global_ids)
    global_names = {i: i for i in global_ids if is_usable(i)}
    for i in global_ids:
        if i not in global_names:
            global_names[i] = table.fresh(i)
    local_names = {(r, p): table.fresh(f"{r}_{p}") for r, p in local_ids}
    return global_names, local_names
