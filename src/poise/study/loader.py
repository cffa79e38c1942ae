"""Read a study file (TOML) and validate every table and key.

Every problem becomes an `InputError` naming the file, the table and the key, and
saying what was expected. Nothing here evaluates user text: expressions go through
the whitelisting parser in `poise.study.expressions`.
"""

from __future__ import annotations

import keyword
import math
import re
import tomllib
from pathlib import Path
from typing import Any, Mapping

import sympy

from poise.errors import ExpressionError, InputError
from poise.model.conservation import extra_laws
from poise.sampling.distributions import check_parameter, make_distribution
from poise.study.claims import compile_claim
from poise.study.expressions import FUNCTIONS, parse_expression, referenced_names
from poise.study.keys import integer as _integer, no_unknown_keys as _no_unknown_keys, table as _table
from poise.study.longrun_keys import claims_need_long_run, initial_state, long_run_settings
from poise.study.spec import (RunSettings, SamplingSettings, SensitivitySettings,
                              SolverSettings, Study)
from poise.study.vocabulary import (CLAIM_WORDS, SET_COLUMNS, is_hostile_character,
                                    is_table_column, state_columns, visible)

TOP_LEVEL = {"title", "model", "parameters", "claims", "sampling", "sensitivity", "solver", "run",
             "long_run"}
MODEL_KEYS = {"states", "ode", "let", "domain", "conserved", "sbml", "initial"}
RESERVED = set(FUNCTIONS) | CLAIM_WORDS
NAME_PATTERN = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
# single-line text: names and titles (expressions may span lines)
ONE_LINE_KEYS = {"title", "name"}
DESIGNS = ("sobol", "lhs", "random")
SOLVER_METHODS = ("auto", "newton", "homotopy")
MAX_SIZE = 2**24
MAX_SEED = 2**63 - 1


class _Where:
    """Builds located errors for one file."""

    def __init__(self, file: str):
        self.file = file

    def error(self, table: str | None, key: str | None, problem: str) -> InputError:
        return InputError(problem, file=self.file, table=table, key=key)


def load_study(path: str | Path, *, text: str | None = None) -> Study:
    """Read and validate a study file.

    Parameters
    ----------
    path : str or Path
        The study file; relative paths inside it (an SBML model) are resolved
        against its folder.
    text : str, optional
        The file's content, when already read (e.g. by a worker process).

    Returns
    -------
    Study

    Raises
    ------
    InputError
        With file, table and key, for anything invalid.
    """
    path = Path(path)
    where = _Where(str(path))
    if text is None:
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise where.error(None, None, "no such study file") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise where.error(None, None, f"cannot read the study file ({exc})") from None
    text = text.removeprefix("\ufeff")   # a byte-order mark some editors write
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise where.error(None, None, f"not valid TOML: {exc}") from None
    except RecursionError:   # the TOML reader recurses once per nested array or table
        raise where.error(None, None, "arrays or tables are nested too deeply to read") from None
    _no_hostile_text(data, where)
    return _build(path, text, data, where)


def _no_hostile_text(data: dict, where: _Where) -> None:
    """Refuse control and text-direction characters in every key and string: printed
    raw, they could rewrite a terminal or reorder what a reader of the report sees.
    (Walked with a stack: TOML nests as deep as its reader allows.)"""
    pending: list[tuple[str | None, dict | list]] = [(None, data)]
    while pending:
        table, container = pending.pop()
        items = container.items() if isinstance(container, dict) else ((None, v) for v in container)
        for number, (key, value) in enumerate(items, start=1):
            if key is not None:
                _hostile(key, table, key, where, allow_line_breaks=False)
            if isinstance(value, str):
                _hostile(value, table, key, where, allow_line_breaks=key not in ONE_LINE_KEYS)
            elif isinstance(value, (dict, list)):
                inner = f"{table}[{number}]" if key is None else (f"{table}.{key}" if table else key)
                pending.append((inner, value))


def _hostile(text: str, table: str | None, key: str | None, where: _Where, allow_line_breaks: bool) -> None:
    for char in text:
        if is_hostile_character(char, allow_line_breaks):
            raise where.error(table, key, f"holds the control or text-direction character "
                                          f"{visible(char)}, which poise refuses in names, titles "
                                          f"and expressions")


def _build(path: Path, text: str, data: dict, where: _Where) -> Study:
    _no_unknown_keys(data, TOP_LEVEL, None, where)
    title = data.get("title", path.stem)
    if not isinstance(title, str):
        raise where.error(None, "title", "expected a string")
    model = _table(data, "model", where, required=True)
    _no_unknown_keys(model, MODEL_KEYS, "model", where)
    warnings: list[str] = []

    sbml_extra: dict[str, Any] = {}
    if "sbml" in model:
        states, ode_text, imported, sbml_extra = _from_sbml(path, model, where, warnings)
    else:
        states = _states(model, where)
        ode_text = _ode_text(model, states, where)
        imported = {}

    # an SBML model brings its own values: [parameters] then only changes some
    parameters_table = _table(data, "parameters", where, required="sbml" not in model)
    fixed, uncertain = _parameters(parameters_table, imported, where)
    parameter_names = list(fixed) + list(uncertain)
    if imported or sbml_extra:   # ids of the SBML file, named by where they come from
        _check_names([*states, *imported], "model", "sbml", where)
    _check_names(states, "model", "states", where)
    _check_names(parameter_names, "parameters", None, where)
    clash = set(states) & set(parameter_names)
    if clash:
        name = sorted(clash)[0]
        raise where.error("parameters", name, f"'{name}' is already a state; a name can be a state or a parameter, not both")

    symbols = {name: sympy.Symbol(name, real=True) for name in [*states, *parameter_names]}
    let_exprs = _let(model, symbols, where, sbml_extra.get("let", {}))
    names: dict[str, sympy.Basic] = {**symbols, **let_exprs}
    ode = {s: _parse(ode_text[s], names, where, "model.ode", s) for s in states}

    conserved_text = model.get("conserved", {})
    if not isinstance(conserved_text, dict):
        raise where.error("model", "conserved", "expected a table of total = \"linear combination of states\"")
    conserved = {}
    for total, combination in conserved_text.items():
        if total not in parameter_names:
            raise where.error("model.conserved", total,
                              f"the total '{total}' needs a value in [parameters] (a number or a distribution)")
        if not isinstance(combination, str):
            raise where.error("model.conserved", total, "expected a string such as \"E + C\"")
        conserved[total] = _parse(combination, symbols, where, "model.conserved", total)
    # laws derived from an SBML file join the declared ones, unless these already imply them
    derived = {t: _parse(c, symbols, where, "model.conserved", t) for t, c in sbml_extra.get("conserved", {}).items()}
    kept = extra_laws(conserved, derived, states, sbml_extra.get("requires"), list(uncertain))
    for total in derived:
        if total in kept and total not in conserved:
            conserved[total] = derived[total]
        elif total not in conserved:
            fixed.pop(total, None)
    parameter_names = list(fixed) + list(uncertain)

    domain = _domain(model, states, where, sbml_extra.get("domain", {}))
    initial = initial_state(model, states, domain, sbml_extra.get("initial", {}), where)
    long_run = long_run_settings(data, states, domain, where)
    claims = _claims(data, states, parameter_names, where)
    claims_need_long_run(claims, long_run, initial, where)
    used = set(conserved)
    for expr in [*ode.values(), *conserved.values()]:
        used |= {str(s) for s in expr.free_symbols}
    for claim in claims:
        used |= claim.names
    for name in parameter_names:
        if name in used:
            continue
        if name in uncertain:   # its spread would be reported as if it mattered
            raise where.error("parameters", name, f"'{name}' has a distribution but the model "
                              "and the claims do not use it; remove it or give it a plain value")
        warnings.append(f"{where.file}: [parameters] key '{name}': declared but not used by the model")
    study = Study(
        path=path, text=text, title=title, states=tuple(states), ode=ode,
        ode_text=dict(ode_text), domain=domain, conserved=conserved, fixed=fixed,
        uncertain=uncertain, claims=claims,
        sampling=_sampling(data, where), sensitivity=_sensitivity(data, where),
        solver=_solver(data, where), run=_run(data, where), warnings=tuple(warnings),
        initial=initial, units=sbml_extra.get("units", {}),
        size=sbml_extra.get("size", {}), long_run=long_run,
    )
    return study


# --- model -------------------------------------------------------------------

def _states(model: dict, where: _Where) -> list[str]:
    states = model.get("states")
    if states is None:
        raise where.error("model", "states", "missing: list the state variables, e.g. states = [\"A\", \"G\"] (or give sbml = \"file.xml\")")
    if not isinstance(states, list) or not states or not all(isinstance(s, str) for s in states):
        raise where.error("model", "states", "expected a non-empty list of names, e.g. [\"A\", \"G\"]")
    seen = set()
    for s in states:
        if s in seen:
            raise where.error("model", "states", f"'{s}' is listed twice")
        seen.add(s)
    return states


def _ode_text(model: dict, states: list[str], where: _Where) -> dict[str, str]:
    ode = model.get("ode")
    if not isinstance(ode, dict):
        raise where.error("model", "ode", "missing: give a table [model.ode] with one expression per state")
    for key, value in ode.items():
        if key not in states:
            raise where.error("model.ode", key, f"'{key}' is not a state; states are {', '.join(states)}")
        if not isinstance(value, str):
            raise where.error("model.ode", key, "expected the right-hand side as a string, e.g. \"r*A*(1 - A/K)\"")
    for s in states:
        if s not in ode:
            raise where.error("model.ode", s, f"state '{s}' has no equation: add {s} = \"...\" under [model.ode]")
    return {s: ode[s] for s in states}


def _let(model: dict, symbols: dict[str, sympy.Symbol], where: _Where, imported=None) -> dict[str, sympy.Expr]:
    let = model.get("let", {})
    if not isinstance(let, dict):
        raise where.error("model", "let", "expected a table of name = \"expression\"")
    let = {**(imported or {}), **let}  # an SBML model's rules and rates, then the study's own
    _check_names(list(let), "model.let", None, where)
    for name, text in let.items():
        if name in symbols:
            raise where.error("model.let", name, f"'{name}' is already a state or parameter")
        if not isinstance(text, str):
            raise where.error("model.let", name, "expected an expression string")
    deps = {}
    for name, text in let.items():
        try:
            deps[name] = {d for d in referenced_names(text) if d in let}
        except ExpressionError as exc:
            raise where.error("model.let", name, str(exc)) from None
    order = _topological(deps, where)
    resolved: dict[str, sympy.Expr] = {}
    for name in order:
        resolved[name] = _parse(let[name], {**symbols, **resolved}, where, "model.let", name)
    return resolved


def _topological(deps: dict[str, set[str]], where: _Where) -> list[str]:
    order: list[str] = []
    state: dict[str, int] = {}

    def visit(name: str, trail: list[str]) -> None:
        if state.get(name) == 2:
            return
        if state.get(name) == 1:
            cycle = trail[trail.index(name):] + [name]
            raise where.error("model.let", name, "these definitions refer to each other in a cycle: " + " -> ".join(cycle))
        state[name] = 1
        for dep in sorted(deps[name]):
            visit(dep, trail + [name])
        state[name] = 2
        order.append(name)

    for name in deps:
        visit(name, [])
    return order


def _domain(model: dict, states: list[str], where: _Where, defaults=None) -> dict[str, tuple[float, float]]:
    domain = {s: (defaults or {}).get(s, (0.0, math.inf)) for s in states}
    given = model.get("domain", {})
    if not isinstance(given, dict):
        raise where.error("model", "domain", "expected a table of state = [low, high]")
    for key, bounds in given.items():
        if key not in states:
            raise where.error("model.domain", key, f"'{key}' is not a state")
        if (not isinstance(bounds, list) or len(bounds) != 2
                or not all(isinstance(b, (int, float)) and not isinstance(b, bool) for b in bounds)):
            raise where.error("model.domain", key, "expected [low, high], e.g. [0, inf] or [-inf, inf]")
        low, high = float(bounds[0]), float(bounds[1])
        if math.isnan(low) or math.isnan(high) or low >= high:
            raise where.error("model.domain", key, f"expected low < high, got [{bounds[0]}, {bounds[1]}]")
        domain[key] = (low, high)
    return domain


def _from_sbml(path: Path, model: dict, where: _Where, warnings: list[str]):
    for key in ("states", "ode"):
        if key in model:
            raise where.error("model", key, "give either sbml = \"file.xml\" or states and ode, not both")
    file = model["sbml"]
    if not isinstance(file, str):
        raise where.error("model", "sbml", "expected the SBML file's path as a string")
    try:
        from poise.sbml import read_sbml  # imported only when a study asks for SBML
    except ImportError:
        raise where.error("model", "sbml", "reading SBML needs python-libsbml: pip install python-libsbml") from None
    imported = read_sbml(path.parent / file)
    warnings.extend(imported.warnings)
    extra = {"initial": dict(imported.initial), "units": dict(imported.units),
             "size": dict(imported.size), "conserved": dict(imported.conserved),
             "let": dict(imported.let), "domain": dict(imported.domain),
             "requires": dict(imported.conserved_requires)}
    return list(imported.states), dict(imported.ode), dict(imported.parameters), extra


# --- parameters ----------------------------------------------------------------

def _parameters(table: dict, imported: Mapping[str, float], where: _Where):
    fixed: dict[str, float] = {name: float(v) for name, v in imported.items()}
    uncertain = {}
    for name, value in table.items():
        problems = check_parameter(name, value)
        if problems:
            key, problem = problems[0]
            raise where.error("parameters", key, problem)
        if isinstance(value, dict):
            fixed.pop(name, None)
            uncertain[name] = make_distribution(value)
        else:
            fixed[name] = float(value)
    return fixed, uncertain


def _check_names(names, table: str, key: str | None, where: _Where) -> None:
    for name in names:
        if not NAME_PATTERN.match(name) or keyword.iskeyword(name) or "__" in name:
            raise where.error(table, key or name, f"'{name}' is not a usable name: start with a letter, then letters, digits or _ (no double underscores)")
        if name in RESERVED:
            raise where.error(table, key or name, f"'{name}' is a reserved word in poise expressions; choose another name")
        if is_table_column(name) and table != "model.let":
            raise where.error(table, key or name, f"'{name}' names a column of the run's tables "
                              "(samples, outcomes or steady states); choose another name")


# --- claims and settings -------------------------------------------------------

def _claims(data: dict, states, parameters, where: _Where):
    claims = data.get("claims", [])
    if not isinstance(claims, list):
        raise where.error(None, "claims", "expected [[claims]] tables, each with name and holds")
    compiled, seen = [], set()
    for i, claim in enumerate(claims):
        table = f"claims[{i + 1}]"
        if not isinstance(claim, dict):
            raise where.error(table, None, "expected a table with name and holds")
        _no_unknown_keys(claim, {"name", "holds"}, table, where)
        name, holds = claim.get("name"), claim.get("holds")
        if not isinstance(name, str) or not name.strip():
            raise where.error(table, "name", "expected a non-empty string")
        if " ".join(name.split()) in SET_COLUMNS or name.strip() in state_columns(states):
            raise where.error(table, "name", f"'{name}' names a column of the run's tables; choose another claim name")
        # names differing only in spaces would print alike in every table and figure
        if " ".join(name.split()) in seen:
            raise where.error(table, "name", f"another claim is already called '{name}' "
                                             "(names that differ only in spaces count as the same)")
        seen.add(" ".join(name.split()))
        if not isinstance(holds, str):
            raise where.error(table, "holds", "expected a condition string, e.g. \"count(stable) >= 2\"")
        try:
            compiled.append(compile_claim(name, holds, states, parameters))
        except ExpressionError as exc:
            raise where.error(table, "holds", str(exc)) from None
    return tuple(compiled)


def _sampling(data: dict, where: _Where) -> SamplingSettings:
    table = _table(data, "sampling", where)
    _no_unknown_keys(table, {"size", "design", "seed"}, "sampling", where)
    size = _integer(table, "size", SamplingSettings.size, 1, MAX_SIZE, "sampling", where)
    seed = _integer(table, "seed", SamplingSettings.seed, 0, MAX_SEED, "sampling", where)
    design = _choice(table, "design", SamplingSettings.design, DESIGNS, "sampling", where)
    return SamplingSettings(size=size, design=design, seed=seed)


def _sensitivity(data: dict, where: _Where) -> SensitivitySettings:
    table = _table(data, "sensitivity", where)
    _no_unknown_keys(table, {"method", "second_order", "resamples"}, "sensitivity", where)
    method = _choice(table, "method", SensitivitySettings.method, ("sobol", "none"), "sensitivity", where)
    second = table.get("second_order", False)
    if not isinstance(second, bool):
        raise where.error("sensitivity", "second_order", "expected true or false")
    resamples = _integer(table, "resamples", SensitivitySettings.resamples, 10, 100_000, "sensitivity", where)
    return SensitivitySettings(method=method, second_order=second, resamples=resamples)


def _solver(data: dict, where: _Where) -> SolverSettings:
    table = _table(data, "solver", where)
    _no_unknown_keys(table, {"method", "starts", "deflation_rounds", "max_iterations", "check_sets"}, "solver", where)
    return SolverSettings(
        method=_choice(table, "method", SolverSettings.method, SOLVER_METHODS, "solver", where),
        starts=_integer(table, "starts", SolverSettings.starts, 0, 10_000, "solver", where),
        deflation_rounds=_integer(table, "deflation_rounds", SolverSettings.deflation_rounds, 0, 20, "solver", where),
        max_iterations=_integer(table, "max_iterations", SolverSettings.max_iterations, 5, 10_000, "solver", where),
        check_sets=(_integer(table, "check_sets", 0, 0, 100_000, "solver", where) if "check_sets" in table
                    else SolverSettings.check_sets),
    )


def _run(data: dict, where: _Where) -> RunSettings:
    table = _table(data, "run", where)
    _no_unknown_keys(table, {"jobs", "chunk_size"}, "run", where)
    return RunSettings(
        jobs=_integer(table, "jobs", RunSettings.jobs, 0, 4096, "run", where),
        chunk_size=_integer(table, "chunk_size", RunSettings.chunk_size, 1, 1_000_000, "run", where),
    )


# --- small helpers ---------------------------------------------------------------

def _parse(text: str, names, where: _Where, table: str, key: str) -> sympy.Expr:
    try:
        return parse_expression(text, names)
    except ExpressionError as exc:
        unknown = getattr(exc, "unknown_names", None)
        if unknown:
            listed = ", ".join(f"'{u}'" for u in unknown)
            raise where.error(table, key, f"{listed} is used but not declared: add it to [parameters] (or [model.states])") from None
        raise where.error(table, key, str(exc)) from None


def _choice(table: dict, key: str, default: str, options, name: str, where: _Where) -> str:
    value = table.get(key, default)
    if value not in options:
        raise where.error(name, key, f"expected one of {', '.join(repr(o) for o in options)}, got {value!r}")
    return value
