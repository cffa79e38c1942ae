"""Reading keys of a study file's TOML tables, with errors that name file, table and key.

`where` is any object with ``error(table, key, problem) -> InputError`` (the loader's
`_Where`), so that every module reading a part of a study reports problems alike.
"""

from __future__ import annotations


def table(data: dict, name: str, where, required: bool = False) -> dict:
    """The table `name` of `data` ({} when absent and not `required`)."""
    if name not in data:
        if required:
            raise where.error(name, None, f"missing: the study needs a [{name}] table")
        return {}
    value = data[name]
    if not isinstance(value, dict):
        raise where.error(name, None, "expected a table")
    return value


def no_unknown_keys(table: dict, allowed: set[str], name: str | None, where) -> None:
    """Refuse a key outside `allowed` (a typo would otherwise be silently ignored)."""
    for key in table:
        if key not in allowed:
            raise where.error(name, key, f"unknown key; expected one of {', '.join(sorted(allowed))}")


def integer(table: dict, key: str, default: int, low: int, high: int, name: str, where) -> int:
    """A whole number from `low` to `high` (true/false is not a number here)."""
    value = table.get(key, default)
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise where.error(name, key, f"expected a whole number from {low} to {high}, got {value!r}")
    return value
