"""Build the ODEs of an SBML model, as the SBML standard defines them.

Outline: open the file safely (`poise.sbml.document`); collect the elements by id
(`poise.sbml.elements`); give every id a poise name; read all math into sympy;
decide the states; keep rules, rates and parameter-only initial assignments as
named sub-expressions (`poise.sbml.rules`); assemble d(state)/dt from kinetic laws
and stoichiometry, or from rate rules; declare the conservation laws
(`poise.sbml.laws`); evaluate initial values (`poise.sbml.values`); print
everything as study-file text.
"""

from __future__ import annotations

import math
from pathlib import Path

import libsbml
import sympy

from poise.errors import InputError
from poise.model.conservation import exact
from poise.sbml.document import load_document
from poise.sbml.elements import Elements, participants
from poise.sbml.laws import conservation_laws
from poise.sbml.mathml import TIME, MathReader, SbmlProblem, number, to_text
from poise.sbml.model import SbmlModel
from poise.sbml.names import assign_names
from poise.sbml.rules import dependency_order, explain, inline_all
from poise.sbml.values import evaluate


def read_sbml(path: str | Path) -> SbmlModel:
    """Read an SBML file (Level 2 or 3) into ODEs in study-file syntax.

    Parameters
    ----------
    path : str or Path
        The SBML file.

    Returns
    -------
    SbmlModel

    Raises
    ------
    InputError
        If the file cannot be read, is too large or too deeply nested, is not SBML,
        or holds content a steady-state analysis cannot take (time-dependent rates,
        delays, discontinuous functions, algebraic rules, fast reactions,
        conversion factors, variable stoichiometry); the message names the SBML
        element and, where there is one, what to do. Events are not an error: they
        are ignored with a warning.
    """
    path = Path(path)
    try:
        document = load_document(path)
        return _Builder(document).build()
    except SbmlProblem as exc:
        raise InputError(str(exc), file=str(path), table="model", key="sbml") from None
    except RecursionError:
        raise InputError("the model's math is nested too deeply to read", file=str(path),
                         table="model", key="sbml") from None


class _Builder:
    """One pass over one document; keeps the document alive for libsbml's trees."""

    def __init__(self, document: libsbml.SBMLDocument):
        self.document = document
        self.e = Elements(document.getModel())
        self.level = self.e.level
        self.warnings: list[str] = list(self.e.warnings)
        self.refused: dict[sympy.Symbol, SbmlProblem] = {}
        self._values: dict[sympy.Symbol, float] = {}
        self.amount_of: dict[sympy.Symbol, str] = {}  # fixed amount parameter -> species id

    def build(self) -> SbmlModel:
        self._name_everything()
        self._read_math()
        self._classify()
        self._varying_compartments()
        ode = self._odes()
        lets = dependency_order(self.definitions, sorted(_symbols(ode.values()), key=str), self.origin)
        self._refuse_what_equations_cannot_use(ode, lets)
        conserved, totals, requires = self._conservation(ode)
        let_symbols = set(lets)
        lets_math = {s: self.definitions[s] for s in lets}
        used = _symbols([*ode.values(), *lets_math.values()]) - self.state_symbols - let_symbols
        # a symbol that cancels once everything is inlined (the compartment size in
        # `cell*k*S` divided by `cell`) is no parameter of the model: its value is written in
        dead = used - _symbols(self.inline(expr) for expr in ode.values())
        if dead:
            numbers = {s: _exact_number(self._value(s)) for s in dead}
            ode = {k: v.xreplace(numbers) for k, v in ode.items()}
            lets_math = {k: v.xreplace(numbers) for k, v in lets_math.items()}
            used -= dead
        parameters = {s.name: self._value(s) for s in self._ordered(used)}
        parameters.update(totals)
        species_states = [s for s in self.states if s in self.e.species]
        self._warn_unused(let_symbols)
        return SbmlModel(
            states=tuple(self.name[s] for s in self.states),
            ode={self.name[s]: self._text(ode[self.sym[s]], f"d{s}/dt") for s in self.states},
            let={s.name: self._text(lets_math[s], self.origin[s]) for s in lets},
            parameters=parameters,
            conserved=conserved,
            conserved_requires=requires,
            initial={self.name[s]: self._value(self.sym[s]) for s in self.states},
            units={self.name[s]: "amount" if self.e.in_amounts(s) else "concentration"
                   for s in species_states},
            size={self.name[s]: self._size(self.e.species[s].getCompartment()) for s in species_states},
            domain={self.name[s]: (0.0, math.inf) if s in self.e.species else (-math.inf, math.inf)
                    for s in self.states},
            warnings=tuple(self.warnings),
            outputs=self._outputs(self.state_symbols | set(parameters_symbols(parameters))),
        )

    # --- names and math --------------------------------------------------------

    def _name_everything(self) -> None:
        e = self.e
        ids = [*e.compartments, *e.species, *e.parameters, *e.reactions, *e.references]
        locals_ = [(rid, p.getId()) for rid, r in e.reactions.items() for p in e.local_parameters(r)]
        self.name, local_names = assign_names(ids, locals_)
        self.sym = {i: sympy.Symbol(self.name[i]) for i in ids}
        self.local_sym = {key: sympy.Symbol(n) for key, n in local_names.items()}
        self.taken = set(self.name.values()) | set(local_names.values())
        # symbol -> how messages name it
        self.origin = {s: f"'{i}'" for i, s in self.sym.items()}
        self.origin.update({s: f"the local parameter '{p}' of reaction '{r}'"
                            for (r, p), s in self.local_sym.items()})

    def _fresh(self, stem: str) -> str:
        name, k = stem, 2
        while name in self.taken:
            name, k = f"{stem}_{k}", k + 1
        self.taken.add(name)
        return name

    def _read_math(self) -> None:
        e = self.e
        self.reader = MathReader(self.sym, e.functions)
        self.local_values: dict[sympy.Symbol, sympy.Expr | None] = {}
        self.definitions: dict[sympy.Symbol, sympy.Expr] = {}
        for rid, reaction in e.reactions.items():
            symbol = self.sym[rid]
            self.origin[symbol] = f"the kinetic law of reaction '{rid}'"
            law = reaction.getKineticLaw()
            if law is None or not law.isSetMath():
                self.warnings.append(f"reaction '{rid}' has no kinetic law; its rate is taken as 0")
                self.definitions[symbol] = sympy.Integer(0)
                continue
            local = {}
            for p in e.local_parameters(reaction):
                local[p.getId()] = self.local_sym[(rid, p.getId())]
                self.local_values[local[p.getId()]] = sympy.Float(p.getValue()) if p.isSetValue() else None
            self.definitions[symbol] = self._read_or_defer(law.getMath(), self.origin[symbol], local)
        for target, math_ in e.assigned.items():
            self.origin[self.sym[target]] = f"the assignmentRule for '{target}'"
            self.definitions[self.sym[target]] = self._read_or_defer(math_, self.origin[self.sym[target]])
        self.rate_rules = {target: self.reader.read(math_, f"the rateRule for '{target}'")
                           for target, math_ in e.rated.items()}
        self.initial_raw = {target: self._read_or_defer(math_, f"the initialAssignment for '{target}'")
                            for target, math_ in e.initial_math.items()}
        self.resolved = inline_all(self.definitions, self.origin)

    def _read_or_defer(self, math_, where: str, local=None) -> sympy.Expr:
        """Read math that may turn out unused; unreadable math becomes a marker that
        raises the deferred error where something needs it."""
        try:
            return self.reader.read(math_, where, local)
        except SbmlProblem as exc:
            marker = sympy.Symbol(f"@refused {where}")
            self.refused[marker] = exc
            return marker

    def inline(self, expr: sympy.Expr) -> sympy.Expr:
        """Replace named sub-expressions (rules, reaction ids) by their math."""
        inner = {s: self.resolved[s] for s in expr.free_symbols if s in self.resolved}
        return expr.xreplace(inner) if inner else expr

    def _text(self, expr: sympy.Expr, where: str) -> str:
        try:
            return to_text(expr)
        except SbmlProblem as exc:
            raise SbmlProblem(f"{where}: {exc}") from None

    # --- states --------------------------------------------------------------

    def _classify(self) -> None:
        """States, in document order: species, then compartments, then parameters."""
        e = self.e
        self.net = self._net_stoichiometry()
        reacting = {sid for sid, row in self.net.items() if any(nu != 0 for nu in row.values())}
        states = []
        for sid, species in e.species.items():
            if sid in e.assigned:
                continue
            if sid in e.rated or (not species.getConstant() and not species.getBoundaryCondition()
                                  and sid in reacting):
                states.append(sid)
        states += [c for c in e.compartments if c in e.rated]
        states += [p for p in e.parameters if p in e.rated]
        self.states = states
        self.state_symbols = {self.sym[s] for s in states}
        self._parameter_lets()

    def _parameter_lets(self) -> None:
        """Parameters and compartments set once by an initialAssignment of parameters
        alone stay symbolic, so the parameters upstream can vary."""
        species = {self.sym[s] for s in self.e.species}
        for target, expr in self.initial_raw.items():
            if target not in self.e.parameters and target not in self.e.compartments:
                continue
            symbol = self.sym[target]
            if target in self.e.rated or target in self.e.assigned:
                continue
            inlined = self.inline(expr).free_symbols
            if inlined & (self.state_symbols | species | {TIME} | set(self.refused)):
                continue
            if any(s in self.definitions for s in expr.free_symbols):
                continue  # it uses a rate or a rule: its value is taken at time 0
            self.origin[symbol] = f"the initialAssignment for '{target}'"
            self.definitions[symbol] = expr
        self.resolved = inline_all(self.definitions, self.origin)

    def _stoichiometry(self, rid: str, ref) -> float:
        if ref.isSetId() and ref.getId() in self.e.initial_math:
            return self._value(self.sym[ref.getId()])
        if self.level >= 3 and not ref.isSetStoichiometry():
            raise SbmlProblem(f"the stoichiometry of species '{ref.getSpecies()}' in reaction "
                              f"'{rid}' is not set")
        value = float(ref.getStoichiometry())
        if not math.isfinite(value):
            raise SbmlProblem(f"the stoichiometry of species '{ref.getSpecies()}' in reaction "
                              f"'{rid}' is not a finite number")
        return value

    def _net_stoichiometry(self) -> dict[str, dict[str, float]]:
        """species id -> {reaction id -> products minus reactants} (a species on both
        sides with equal stoichiometry has net 0 there: it is not changed)."""
        net: dict[str, dict[str, float]] = {}
        for rid, reaction in self.e.reactions.items():
            for sign, refs in ((-1.0, reaction.getListOfReactants()),
                               (1.0, reaction.getListOfProducts())):
                for ref in refs:
                    row = net.setdefault(ref.getSpecies(), {})
                    row[rid] = row.get(rid, 0.0) + sign * self._stoichiometry(rid, ref)
        return net

    def _varying_compartments(self) -> None:
        """Compartments whose size changes in time; species in them that nothing else
        changes keep their amount, so their concentration is amount / size."""
        self.varying = set()
        for cid in self.e.compartments:
            size = self.inline(self.sym[cid])
            if cid in self.e.rated or size.free_symbols & (self.state_symbols | {TIME}):
                self.varying.add(cid)
        fixed_amounts = {}
        for sid, species in self.e.species.items():
            cid = species.getCompartment()
            if cid in self.varying and sid not in self.states and sid not in self.e.assigned \
                    and not self.e.in_amounts(sid):
                amount = sympy.Symbol(self._fresh(f"{self.name[sid]}_amount"))
                self.amount_of[amount] = sid
                self.origin[amount] = f"the amount of species '{sid}'"
                fixed_amounts[self.sym[sid]] = amount / self.sym[cid]
        if fixed_amounts:
            self.definitions = {s: e.xreplace(fixed_amounts) for s, e in self.definitions.items()}
            self.rate_rules = {t: e.xreplace(fixed_amounts) for t, e in self.rate_rules.items()}
            self.resolved = inline_all(self.definitions, self.origin)
            self.fixed_amounts = fixed_amounts
        else:
            self.fixed_amounts = {}

    def _odes(self) -> dict[sympy.Symbol, sympy.Expr]:
        ode = {self.sym[t]: rate for t, rate in self.rate_rules.items() if t in self.states}
        for sid in self.states:
            if sid not in self.e.species or sid in self.e.rated:
                continue
            terms = [number(nu) * self.sym[rid] for rid, nu in self.net[sid].items() if nu != 0]
            if self.e.in_amounts(sid):
                ode[self.sym[sid]] = sympy.Add(*terms)
                continue
            cid = self.e.species[sid].getCompartment()
            size = self.sym[cid]
            ode[self.sym[sid]] = sympy.Add(*[t / size for t in terms]) + self._dilution(sid, cid, ode)
        return ode

    def _dilution(self, sid: str, cid: str, ode: dict) -> sympy.Expr:
        """-[S]·(dV/dt)/V: reactions change amounts, so a growing compartment dilutes."""
        if cid not in self.varying:
            return sympy.Integer(0)
        size = self.inline(self.sym[cid])
        moving = size.free_symbols & self.state_symbols
        rate = sympy.Integer(0)
        for symbol in moving:
            if symbol not in ode or self.name_to_id.get(symbol) in self.e.species:
                raise SbmlProblem(f"the size of compartment '{cid}' depends on species "
                                  f"{self.origin[symbol]}, which is not supported")
            rate += ode[symbol] if symbol == size else sympy.diff(size, symbol) * self.inline(ode[symbol])
        return -self.sym[sid] * rate / self.sym[cid]

    def _refuse_what_equations_cannot_use(self, ode: dict, lets: list[sympy.Symbol]) -> None:
        """Refuse, naming the element, whatever the equations use that a steady-state
        model cannot (time, delays, jumps...)."""
        users: dict[sympy.Symbol, str] = {}
        for state, expr in ode.items():
            where = self._equation_name(state)
            for s in expr.free_symbols & self.definitions.keys():
                users.setdefault(s, where)
        for symbol in reversed(lets):
            for s in self.definitions[symbol].free_symbols & self.definitions.keys():
                users.setdefault(s, self.origin[symbol])
        for symbol in lets:  # dependencies first: the element that holds the construct is named
            problem = explain(self.definitions[symbol], self.origin[symbol], self.reader.origins, self.refused)
            if problem:
                user = users.get(symbol)
                prefix = f"{user} needs '{self.name_to_id.get(symbol, symbol.name)}': " if user else ""
                raise SbmlProblem(prefix + str(problem)) from None
        for state, expr in ode.items():
            problem = explain(expr, self._equation_name(state), self.reader.origins, self.refused)
            if problem:
                raise problem

    def _equation_name(self, state: sympy.Symbol) -> str:
        sid = self.name_to_id[state]
        return f"the rateRule for '{sid}'" if sid in self.e.rated else f"the equation of species '{sid}'"

    def _warn_unused(self, needed: set) -> None:
        for pid, parameter in self.e.parameters.items():
            if parameter.isSetValue() and not math.isfinite(parameter.getValue()) \
                    and pid not in self.e.initial_math and pid not in self.e.assigned:
                self.warnings.append(f"parameter '{pid}' has the value {parameter.getValue()}, which "
                                     "cannot be used (ignored: no equation depends on it)")
        for problem in self.refused.values():  # a needed one would have stopped the import
            self.warnings.append(f"{problem} (ignored: no equation depends on it)")
        for target in self.e.assigned:
            symbol = self.sym[target]
            if symbol in needed or self.definitions[symbol] in self.refused:
                continue
            problem = explain(self.definitions[symbol], self.origin[symbol], self.reader.origins, self.refused)
            if problem:
                self.warnings.append(f"{problem} (ignored: no equation depends on it)")

    # --- initial values ------------------------------------------------------

    def _initial_expression(self, symbol: sympy.Symbol) -> sympy.Expr | None:
        e = self.e
        if symbol in self.refused:
            raise self.refused[symbol]
        if symbol in self.local_values:
            return self.local_values[symbol]
        if symbol in self.amount_of:
            return self._species_initial(self.amount_of[symbol], amount=True)
        sid = self.name_to_id.get(symbol)
        if sid in self.initial_raw:
            return self.initial_raw[sid]
        if symbol in self.definitions:
            return self.definitions[symbol]
        if sid in e.compartments:
            c = e.compartments[sid]
            if e.zero_dimensional(sid):
                raise SbmlProblem(f"compartment '{sid}' is zero-dimensional: it has no size, so "
                                  "its id cannot be used in math")
            return sympy.Float(c.getSize()) if c.isSetSize() or self.level < 3 else None
        if sid in e.parameters:
            p = e.parameters[sid]
            return sympy.Float(p.getValue()) if p.isSetValue() else None
        if sid in e.references:
            ref = e.references[sid]
            return sympy.Float(ref.getStoichiometry()) if ref.isSetStoichiometry() else None
        if sid in e.species:
            return self._species_initial(sid, amount=self.e.in_amounts(sid))
        return None

    def _species_initial(self, sid: str, amount: bool) -> sympy.Expr | None:
        """The species' initial amount (`amount`) or concentration, from its attributes."""
        species = self.e.species[sid]
        cid = species.getCompartment()
        size = sympy.Integer(1) if self.e.zero_dimensional(cid) else self.sym[cid]
        if species.isSetInitialConcentration():
            value = sympy.Float(species.getInitialConcentration())
            return value * size if amount else value
        if species.isSetInitialAmount():
            value = sympy.Float(species.getInitialAmount())
            return value if amount else value / size
        return None

    @property
    def name_to_id(self) -> dict[sympy.Symbol, str]:
        if not hasattr(self, "_ids"):
            self._ids = {s: i for i, s in self.sym.items()}
        return self._ids

    def _value(self, symbol: sympy.Symbol) -> float:
        """Initial value (t = 0) of any symbol, from initial assignments, rules or attributes."""
        cache = self._values
        stack, expanding = [symbol], set()
        while stack:
            current = stack[-1]
            if current in cache:
                stack.pop()
                continue
            expr = self._initial_expression(current)
            if expr is None:
                name = self.origin.get(current, current.name)
                raise SbmlProblem(f"{name} has no value (no size, value or initial amount, "
                                  "no initialAssignment and no assignmentRule)")
            pending = [s for s in expr.free_symbols if s != TIME and s not in cache]
            if pending:
                if current in expanding:
                    raise SbmlProblem(f"initial values depend on each other in a cycle through "
                                      f"{self.origin.get(current, current.name)}")
                expanding.add(current)
                for s in pending:
                    if s in expanding:
                        raise SbmlProblem(f"initial values depend on each other in a cycle through "
                                          f"{self.origin.get(s, s.name)}")
                stack.extend(pending)
                continue
            stack.pop()
            value = evaluate(expr, {**cache, TIME: 0.0})
            if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(value):
                raise SbmlProblem(f"the initial value of {self.origin.get(current, current.name)} "
                                  "is not a finite real number")
            cache[current] = float(value)
        return cache[symbol]

    def _size(self, cid: str) -> float:
        return 1.0 if self.e.zero_dimensional(cid) else self._value(self.sym[cid])

    # --- conservation and outputs ----------------------------------------------

    def _conservation(self, ode: dict) -> tuple[dict[str, str], dict[str, float], dict]:
        inlined = {s: self.inline(expr) for s, expr in ode.items()}
        values = {}
        for symbol in _symbols(inlined.values()) - self.state_symbols:
            try:
                values[symbol] = self._value(symbol)
            except SbmlProblem:
                pass  # a symbol without value fails where it is used
        states = [self.sym[s] for s in self.states]
        return conservation_laws(inlined, states, values, self._value, self._fresh)

    def _outputs(self, known: set) -> dict[str, str]:
        """SBML id -> value in terms of states and parameters (for comparing with simulations)."""
        outputs = {}
        for sid, symbol in self.sym.items():
            expr = self.inline(self.fixed_amounts.get(symbol, symbol))
            if not isinstance(expr, sympy.Expr) or expr.free_symbols & ({TIME} | set(self.refused)):
                continue
            try:
                fixed = {s: number(self._value(s)) for s in expr.free_symbols - known}
                outputs[sid] = to_text(expr.xreplace(fixed))
            except SbmlProblem:
                continue
        return outputs

    def _ordered(self, symbols: set) -> list[sympy.Symbol]:
        """Symbols in document order (global ids first, then local parameters)."""
        order = {s: k for k, s in enumerate([*self.sym.values(), *self.local_sym.values(),
                                             *self.amount_of])}
        return sorted(symbols, key=lambda s: (order.get(s, len(order)), s.name))


def _symbols(exprs) -> set:
    found = set()
    for expr in exprs:
        found |= expr.free_symbols
    return found


def _exact_number(value: float) -> sympy.Expr:
    """A value written into an expression exactly, so that it still cancels."""
    if value.is_integer() and abs(value) < 2**53:
        return sympy.Integer(int(value))
    return exact(sympy.Float(value))


def parameters_symbols(parameters: dict) -> list[sympy.Symbol]:
    return [sympy.Symbol(name) for name in parameters]
