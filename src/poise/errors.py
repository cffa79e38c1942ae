"""Errors that reach the user.

`InputError` is the one kind of error caused by what the user wrote (a study file,
an SBML file, a command-line argument). The CLI turns it into a single message and
exit status 2; everything else is a bug or an environment problem (exit status 1).
"""

from __future__ import annotations

from poise.study.vocabulary import visible


class InputError(Exception):
    """Invalid user input, located by file, table and key where known.

    Parameters
    ----------
    problem : str
        What is wrong and what was expected, in one sentence.
    file, table, key : str, optional
        Where the problem is: the file path, the TOML table (e.g. ``model.ode``)
        and the key inside it (e.g. ``A``).
    """

    def __init__(self, problem: str, *, file: str | None = None,
                 table: str | None = None, key: str | None = None):
        super().__init__(problem)
        self.problem = problem
        self.file = file
        self.table = table
        self.key = key

    def located(self, *, file: str | None = None, table: str | None = None,
                key: str | None = None) -> "InputError":
        """Return a copy with missing location parts filled in."""
        return InputError(self.problem, file=self.file or file,
                          table=self.table or table, key=self.key or key)

    def __str__(self) -> str:
        where = []
        if self.file:
            where.append(str(self.file))
        if self.table:
            where.append(f"[{self.table}]")
        if self.key:
            where.append(f"key '{self.key}'")
        prefix = " ".join(where)
        # control characters from a file are shown as escapes, never sent to a terminal
        return visible(f"{prefix}: {self.problem}" if prefix else self.problem)


class ExpressionError(ValueError):
    """An expression in study-file syntax was refused by the safe parser."""


class PoiseWarning(UserWarning):
    """Something the user should know that does not stop the work (e.g. `jobs`
    capped); the CLI prints it as one line."""


# scipy warns when a scrambled Sobol' sequence is cut at a size that is not a power of
# 2; poise does that knowingly (the user's size; the finders' start points)
SOBOL_BALANCE_WARNING = r".*balance properties of Sobol' points"


def quiet_sobol_balance() -> None:
    """Hide scipy's balance warning for Sobol' sizes that are not powers of 2 in this
    process (warning filters are per process: worker processes call this too)."""
    import warnings
    warnings.filterwarnings("ignore", message=SOBOL_BALANCE_WARNING, category=UserWarning)
