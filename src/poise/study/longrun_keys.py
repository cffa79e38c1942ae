"""The study-file keys of long-run behaviour: [model.initial] and [long_run].

``[model.initial]`` gives the state where simulations start (an SBML model brings its
own; the table then changes some values). ``[long_run]`` turns the simulation on and
sets which sets, which starts and how long (see `poise.study.spec.LongRunSettings`).
Claims about long-run behaviour are checked here against what the study provides.
"""

from __future__ import annotations

import math
from typing import Mapping

from poise.study.keys import integer, no_unknown_keys, table as read_table
from poise.study.spec import LongRunSettings

LONG_RUN_KEYS = {"share", "box", "box_starts", "max_steps", "horizon"}
DEFAULT_BOX_STARTS = 64   # with a box and no box_starts: a basin share to about +-0.12 (Wilson, p = 1/2)

__all__ = ["LONG_RUN_KEYS", "initial_state", "long_run_settings", "claims_need_long_run"]


def _number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def initial_state(model: dict, states, domain, imported: Mapping[str, float], where) -> dict[str, float]:
    """[model.initial]: where simulations start. A study file lists every state; for an
    SBML model it changes some of the model's own initial values."""
    initial = {s: float(v) for s, v in imported.items()}
    given = model.get("initial")
    if given is None:
        return initial
    if not isinstance(given, dict):
        raise where.error("model", "initial", "expected a table of state = value")
    for key, value in given.items():
        if key not in states:
            raise where.error("model.initial", key, f"'{key}' is not a state; states are {', '.join(states)}")
        if not _number(value):
            raise where.error("model.initial", key, f"expected a finite number, got {value!r}")
        low, high = domain[key]
        if not low <= value <= high:
            raise where.error("model.initial", key, f"{value!r} lies outside the domain of '{key}' "
                                                    f"[{low:g}, {high:g}] ([model.domain])")
        initial[key] = float(value)
    for state in states:
        if state not in initial:
            raise where.error("model.initial", state, f"state '{state}' has no initial value: "
                                                      f"list every state, e.g. {state} = 0.0")
    return {s: initial[s] for s in states}


def long_run_settings(data: dict, states, domain, where) -> LongRunSettings | None:
    """[long_run]: present (even empty) turns the simulation of long-run behaviour on."""
    if "long_run" not in data:
        return None
    table = read_table(data, "long_run", where)
    no_unknown_keys(table, LONG_RUN_KEYS, "long_run", where)
    share = table.get("share", LongRunSettings.share)
    if not _number(share) or not 0 < share <= 1:
        raise where.error("long_run", "share", f"expected the fraction of parameter sets to simulate, "
                                               f"above 0 and at most 1 (1 = all), got {share!r}")
    box = _box(table.get("box", {}), states, domain, where)
    starts = integer(table, "box_starts", DEFAULT_BOX_STARTS if box else 0, 0, 1_000_000, "long_run", where)
    if starts and not box:
        raise where.error("long_run", "box_starts", "box starts need a box: add [long_run.box] with "
                                                    "state = [low, high]")
    if box and not starts:
        raise where.error("long_run", "box_starts", "a box needs at least one start per set")
    horizon = table.get("horizon", LongRunSettings.horizon)
    if not _number(horizon) or not 1 <= horizon <= 1e6:
        raise where.error("long_run", "horizon", f"expected a number from 1 to 1e6 (multiples of each "
                                                 f"set's slowest time scale), got {horizon!r}")
    return LongRunSettings(share=float(share), box=box, box_starts=starts,
                           max_steps=integer(table, "max_steps", LongRunSettings.max_steps, 100,
                                              100_000_000, "long_run", where),
                           horizon=float(horizon))


def _box(box, states, domain, where) -> dict[str, tuple[float, float]]:
    if not isinstance(box, dict):
        raise where.error("long_run", "box", "expected a table of state = [low, high]")
    ranges = {}
    for key, bounds in box.items():
        if key not in states:
            raise where.error("long_run.box", key, f"'{key}' is not a state; states are {', '.join(states)}")
        if not isinstance(bounds, list) or len(bounds) != 2 or not all(_number(b) for b in bounds):
            raise where.error("long_run.box", key, "expected [low, high] with finite numbers, e.g. [0, 2]")
        low, high = float(bounds[0]), float(bounds[1])
        if low >= high:
            raise where.error("long_run.box", key, f"expected low < high, got [{bounds[0]}, {bounds[1]}]")
        if low < domain[key][0] or high > domain[key][1]:
            raise where.error("long_run.box", key, f"[{bounds[0]}, {bounds[1]}] reaches outside the domain "
                                                   f"of '{key}' [{domain[key][0]:g}, {domain[key][1]:g}]")
        ranges[key] = (low, high)
    return {s: ranges[s] for s in states if s in ranges}


def claims_need_long_run(claims, long_run: LongRunSettings | None, initial: dict, where) -> None:
    """A claim about long-run behaviour needs the simulation, and the starts it reads."""
    for i, claim in enumerate(claims):
        words = claim.long_run_words
        if not words:
            continue
        table, word = f"claims[{i + 1}]", sorted(words)[0]
        if long_run is None:
            raise where.error(table, "holds", f"'{word}' is about long-run behaviour, found by simulation: "
                                              "add a [long_run] table to simulate the parameter sets")
        if "basin" in words and not long_run.box_starts:
            raise where.error(table, "holds", "basin() is the share of starts from a box: add "
                                              "[long_run.box] with state = [low, high]")
        if "reaches" in words and not initial:
            raise where.error(table, "holds", "reaches() follows the trajectory from the initial state: "
                                              "add [model.initial] with a value for every state")
