"""Build the ODEs of an SBML model, as the SBML standard defines them.

Outline: collect the elements by id; give every id a poise name; read all math into
sympy (function definitions inlined by `MathReader`); inline assignment rules and
reaction ids; evaluate initial values; assemble d(state)/dt from kinetic laws and
stoichiometry, or from rate rules; find conservation laws; print everything as text.
"""

from __future__ import annotations

from pathlib import Path

import libsbml
import sympy

from poise.errors import InputError
from poise.sbml.conservation import left_null_space
from poise.sbml.mathml import TIME, MathReader, SbmlProblem, number, to_text
from poise.sbml.model import SbmlModel
from poise.sbml.names import assign_names


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
        If the file is missing, is not SBML, or holds content a steady-state
        analysis cannot take (piecewise or logical math, delays, time-dependent
        rates, algebraic rules, fast reactions, conversion factors, variable
        stoichiometry); the message names the SBML element. Events are not an
        error: they are ignored with a warning.
    """
    path = Path(path)
    try:
        document = _load(path)
        return _Builder(document).build()
    except SbmlProblem as exc:
        raise InputError(str(exc), file=str(path), table="model", key="sbml") from None


def _text(expr: sympy.Expr, what: str) -> str:
    try:
        return to_text(expr)
    except SbmlProblem as exc:
        raise SbmlProblem(f"{what}: {exc}") from None


def _load(path: Path) -> libsbml.SBMLDocument:
    if not path.is_file():
        raise SbmlProblem("no such SBML file")
    document = libsbml.readSBMLFromFile(str(path))
    for i in range(document.getNumErrors()):
        error = document.getError(i)
        if error.getSeverity() >= libsbml.LIBSBML_SEV_ERROR:
            raise SbmlProblem(f"not a readable SBML file (line {error.getLine()}: "
                              f"{error.getShortMessage() or error.getMessage().strip()})")
    if document.getModel() is None:
        raise SbmlProblem("the file holds no SBML model")
    return document


class _Builder:
    """One pass over one document; keeps the document alive for libsbml's trees."""

    def __init__(self, document: libsbml.SBMLDocument):
        self.document = document
        self.model = document.getModel()
        self.level = self.model.getLevel()
        self.warnings: list[str] = []
        self._values: dict[sympy.Symbol, float] = {}
        self.refused: dict[sympy.Symbol, SbmlProblem] = {}
        self._totals: list[str] = []

    # --- the whole job ---------------------------------------------------------

    def build(self) -> SbmlModel:
        self._collect()
        self._refuse_unsupported()
        self._name_everything()
        self._read_math()
        self._classify()
        ode = self._odes()
        conserved, totals = self._conservation()
        used = set().union(*[e.free_symbols for e in [*ode.values(), *conserved.values()]])
        parameters = {s.name: self._value(s) for s in self._ordered(used - self.state_symbols)}
        parameters.update(totals)
        species_states = [s for s in self.states if s in self.species]
        return SbmlModel(
            states=tuple(self.name[s] for s in self.states),
            ode={self.name[s]: _text(ode[self.sym[s]], f"d{s}/dt") for s in self.states},
            parameters=parameters,
            conserved={total: _text(expr, total) for total, expr in conserved.items()},
            initial={self.name[s]: self._value(self.sym[s]) for s in self.states},
            units={self.name[s]: self._units(s) for s in species_states},
            size={self.name[s]: self._value(self.sym[self.species[s].getCompartment()])
                  for s in species_states},
            warnings=tuple(self.warnings) + tuple(
                f"{problem} (ignored: no ODE depends on it)" for problem in self.refused.values()),
            outputs=self._outputs(set(self.sym[s] for s in self.states) | used),
        )

    # --- elements --------------------------------------------------------------

    def _collect(self) -> None:
        m = self.model
        self.compartments = {c.getId(): c for c in m.getListOfCompartments()}
        self.species = {s.getId(): s for s in m.getListOfSpecies()}
        self.parameters = {p.getId(): p for p in m.getListOfParameters()}
        self.reactions = {r.getId(): r for r in m.getListOfReactions()}
        self.references = {}
        self.reacting = set()  # species that are reactants or products somewhere
        for reaction in self.reactions.values():
            for ref in self._participants(reaction):
                self.reacting.add(ref.getSpecies())
                if ref.isSetId() and ref.getId():
                    self.references[ref.getId()] = ref
        self.functions = {}
        for fd in m.getListOfFunctionDefinitions():
            if fd.getBody() is None:
                raise SbmlProblem(f"functionDefinition '{fd.getId()}' has no body")
            arguments = tuple(fd.getArgument(i).getName() for i in range(fd.getNumArguments()))
            self.functions[fd.getId()] = (arguments, fd.getBody())
        self.assigned, self.rated = {}, {}
        for k, rule in enumerate(m.getListOfRules()):
            if rule.isAlgebraic():
                label = rule.getIdAttribute() or rule.getMetaId() or f"number {k + 1}"
                formula = libsbml.formulaToL3String(rule.getMath()) if rule.isSetMath() else ""
                raise SbmlProblem(f"algebraicRule {label!r} (0 = {formula}) is not supported: "
                                  "give the model as ODEs")
            target = rule.getVariable()
            if target in self.references:
                raise SbmlProblem(f"variable stoichiometry is not supported: a rule changes "
                                  f"speciesReference '{target}'")
            if target not in self.compartments and target not in self.species \
                    and target not in self.parameters:
                raise SbmlProblem(f"a rule sets '{target}', which the model does not define")
            (self.assigned if rule.isAssignment() else self.rated)[target] = rule.getMath()
        self.initial_math = {ia.getSymbol(): ia.getMath() for ia in m.getListOfInitialAssignments()}
        for event in m.getListOfEvents():
            label = event.getId() or event.getMetaId()
            named = f"event '{label}'" if label else "an event without id"
            self.warnings.append(f"{named} ignored: steady states do not depend on events")
        if m.getNumConstraints():
            self.warnings.append(f"{m.getNumConstraints()} constraint(s) ignored")

    @staticmethod
    def _participants(reaction):
        return [*reaction.getListOfReactants(), *reaction.getListOfProducts()]

    def _refuse_unsupported(self) -> None:
        if self.level >= 3 and self.model.isSetConversionFactor():
            raise SbmlProblem(f"the model's conversionFactor '{self.model.getConversionFactor()}' "
                              "is not supported")
        for sid, species in self.species.items():
            if self.level >= 3 and species.isSetConversionFactor():
                raise SbmlProblem(f"the conversionFactor of species '{sid}' is not supported")
            if species.getCompartment() not in self.compartments:
                raise SbmlProblem(f"species '{sid}' lies in the undefined compartment "
                                  f"'{species.getCompartment()}'")
        for rid, reaction in self.reactions.items():
            if reaction.isSetFast() and reaction.getFast():
                raise SbmlProblem(f"reaction '{rid}' is fast (fast=\"true\"), which is not supported")
            for ref in self._participants(reaction):
                if ref.getSpecies() not in self.species:
                    raise SbmlProblem(f"reaction '{rid}' uses the undefined species '{ref.getSpecies()}'")
                if self.level == 2 and ref.isSetStoichiometryMath():
                    raise SbmlProblem(f"variable stoichiometry is not supported: the stoichiometryMath "
                                      f"of species '{ref.getSpecies()}' in reaction '{rid}'")
        for sid in self.rated:
            if sid in self.species and not self.species[sid].getBoundaryCondition() \
                    and self._in_reactions(sid):
                raise SbmlProblem(f"species '{sid}' has a rateRule and takes part in reactions; "
                                  "SBML allows this only for boundary species")

    def _in_reactions(self, sid: str) -> bool:
        return sid in self.reacting

    def _local_parameters(self, reaction) -> list:
        law = reaction.getKineticLaw()
        if law is None:
            return []
        if self.level >= 3:
            return list(law.getListOfLocalParameters())
        return list(law.getListOfParameters())

    # --- names and math --------------------------------------------------------

    def _name_everything(self) -> None:
        ids = [*self.compartments, *self.species, *self.parameters, *self.reactions,
               *self.references]
        locals_ = [(rid, p.getId()) for rid, r in self.reactions.items()
                   for p in self._local_parameters(r)]
        self.name, local_names = assign_names(ids, locals_)
        self.sym = {i: sympy.Symbol(self.name[i]) for i in ids}
        self.local_sym = {key: sympy.Symbol(n) for key, n in local_names.items()}
        # symbol -> SBML id (or "reaction/parameter"), for messages
        self.origin = {s: i for i, s in self.sym.items()}
        self.origin.update({s: f"{r}/{p}" for (r, p), s in self.local_sym.items()})

    def _read_math(self) -> None:
        reader = MathReader(self.sym, self.functions)
        self.rate_raw: dict[str, sympy.Expr] = {}
        self.local_values: dict[sympy.Symbol, sympy.Expr | None] = {}
        for rid, reaction in self.reactions.items():
            law = reaction.getKineticLaw()
            if law is None or not law.isSetMath():
                self.warnings.append(f"reaction '{rid}' has no kinetic law; its rate is taken as 0")
                self.rate_raw[rid] = sympy.Integer(0)
                continue
            local = {}
            for p in self._local_parameters(reaction):
                symbol = self.local_sym[(rid, p.getId())]
                local[p.getId()] = symbol
                self.local_values[symbol] = sympy.Float(p.getValue()) if p.isSetValue() else None
            self.rate_raw[rid] = reader.read(law.getMath(), f"the kinetic law of reaction '{rid}'", local)
        self.definitions = {self.sym[rid]: rate for rid, rate in self.rate_raw.items()}
        for target, math in self.assigned.items():
            self.definitions[self.sym[target]] = self._read_or_defer(
                reader, math, f"the assignmentRule for '{target}'", target)
        self.rate_rules = {target: reader.read(math, f"the rateRule for '{target}'")
                           for target, math in self.rated.items()}
        self.initial_raw = {target: self._read_or_defer(reader, math,
                                                        f"the initialAssignment for '{target}'", target)
                            for target, math in self.initial_math.items()}
        self.resolved: dict[sympy.Symbol, sympy.Expr] = {}
        for symbol in self.definitions:
            self._resolve(symbol, ())

    def _read_or_defer(self, reader: MathReader, math, where: str, target: str) -> sympy.Expr:
        """Read math that may turn out unused; unsupported math becomes a marker.

        An assignment rule with, say, piecewise math only matters if the ODEs or an
        initial value need it; the marker raises the deferred error when they do.
        """
        try:
            return reader.read(math, where)
        except SbmlProblem as exc:
            marker = sympy.Symbol(f"@refused {where}")
            self.refused[marker] = exc
            return marker

    def _raise_refused(self, expr: sympy.Expr) -> None:
        for symbol in expr.free_symbols:
            if symbol in self.refused:
                raise self.refused[symbol]

    def _resolve(self, symbol: sympy.Symbol, chain: tuple) -> sympy.Expr:
        if symbol in self.resolved:
            return self.resolved[symbol]
        if symbol in chain:
            cycle = " -> ".join(self.origin[s] for s in (*chain[chain.index(symbol):], symbol))
            raise SbmlProblem(f"assignment rules (or reaction rates) depend on each other in a cycle: {cycle}")
        expr = self.definitions[symbol]
        inner = {s: self._resolve(s, (*chain, symbol)) for s in expr.free_symbols if s in self.definitions}
        self.resolved[symbol] = expr.xreplace(inner)
        return self.resolved[symbol]

    def inline(self, expr: sympy.Expr) -> sympy.Expr:
        """Replace assignment-rule targets and reaction ids by their math."""
        return expr.xreplace({s: self.resolved[s] for s in expr.free_symbols if s in self.resolved})

    # --- states --------------------------------------------------------------

    def _classify(self) -> None:
        """States, in document order: species, then compartments, then parameters."""
        states = []
        for sid, species in self.species.items():
            if sid in self.assigned:
                continue
            if sid in self.rated:
                states.append(sid)
            elif not species.getConstant() and not species.getBoundaryCondition() \
                    and self._in_reactions(sid):
                states.append(sid)
        states += [c for c in self.compartments if c in self.rated]
        states += [p for p in self.parameters if p in self.rated]
        self.states = states
        self.state_symbols = {self.sym[s] for s in states}

    def _units(self, sid: str) -> str:
        return "amount" if self.species[sid].getHasOnlySubstanceUnits() else "concentration"

    def _stoichiometry(self, rid: str, ref) -> float:
        if ref.isSetId() and ref.getId() in self.initial_math:
            return self._value(self.sym[ref.getId()])
        if self.level >= 3 and not ref.isSetStoichiometry():
            raise SbmlProblem(f"the stoichiometry of species '{ref.getSpecies()}' in reaction "
                              f"'{rid}' is not set")
        return float(ref.getStoichiometry())

    def _net_stoichiometry(self) -> dict[str, dict[str, float]]:
        """species id -> {reaction id -> products minus reactants}."""
        net: dict[str, dict[str, float]] = {}
        for rid, reaction in self.reactions.items():
            for sign, refs in ((-1.0, reaction.getListOfReactants()),
                               (1.0, reaction.getListOfProducts())):
                for ref in refs:
                    row = net.setdefault(ref.getSpecies(), {})
                    row[rid] = row.get(rid, 0) + sign * self._stoichiometry(rid, ref)
        return net

    def _odes(self) -> dict[sympy.Symbol, sympy.Expr]:
        ode = {}
        for target, rate in self.rate_rules.items():
            if target in self.states:
                ode[self.sym[target]] = self.inline(rate)
                self._refuse_time(ode[self.sym[target]], f"the rateRule for '{target}'", rate)
        self.net = self._net_stoichiometry()
        rates = {rid: self.resolved[self.sym[rid]] for rid in self.reactions}
        for rid, rate in rates.items():
            self._refuse_time(rate, f"the kinetic law of reaction '{rid}'", self.rate_raw[rid])
        for sid in self.states:
            if sid not in self.species or sid in self.rated:
                continue
            if self._units(sid) == "amount":
                ode[self.sym[sid]] = sympy.Add(*[number(nu) * rates[rid]
                                                 for rid, nu in self.net[sid].items()])
                continue
            cid = self.species[sid].getCompartment()
            size = self.inline(self.sym[cid])
            # Divide term by term so that the usual factor `size` in kinetic laws cancels.
            flux = sympy.Add(*[number(nu) * sympy.Add(*[t / size for t in sympy.Add.make_args(rates[rid])])
                               for rid, nu in self.net[sid].items()])
            ode[self.sym[sid]] = flux + self._dilution(sid, cid, size, ode)
        for expr in ode.values():
            self._raise_refused(expr)
        return ode

    def _dilution(self, sid: str, cid: str, size: sympy.Expr, ode: dict) -> sympy.Expr:
        """-[S]·(dV/dt)/V: reactions change amounts, so a growing compartment dilutes."""
        moving = size.free_symbols & self.state_symbols
        if not moving:
            return sympy.Integer(0)
        for symbol in moving:
            if symbol not in ode or self.origin[symbol] in self.species:
                raise SbmlProblem(f"the size of compartment '{cid}' depends on species "
                                  f"'{self.origin[symbol]}', which is not supported")
        rate_of_size = sympy.Add(*[sympy.diff(size, s) * ode[s] for s in moving])
        return -self.sym[sid] * rate_of_size / size

    def _refuse_time(self, expr: sympy.Expr, where: str, raw: sympy.Expr) -> None:
        self._raise_refused(expr)
        if TIME not in expr.free_symbols:
            return
        if TIME in raw.free_symbols:
            raise SbmlProblem(f"{where} depends on time; a steady-state model must be autonomous")
        pending, seen = [raw], set()
        while pending:
            for symbol in pending.pop().free_symbols:
                if symbol in self.definitions and symbol not in seen:
                    seen.add(symbol)
                    if TIME in self.definitions[symbol].free_symbols:
                        raise SbmlProblem(f"{where} depends on time through '{self.origin[symbol]}'; "
                                          "a steady-state model must be autonomous")
                    pending.append(self.definitions[symbol])
        raise SbmlProblem(f"{where} depends on time; a steady-state model must be autonomous")

    # --- initial values ------------------------------------------------------

    def _initial_expression(self, symbol: sympy.Symbol) -> sympy.Expr | None:
        if symbol in self.local_values:
            return self.local_values[symbol]
        sid = self.origin[symbol]
        if sid in self.initial_raw:
            return self.initial_raw[sid]
        if symbol in self.definitions:
            return self.definitions[symbol]
        if sid in self.compartments:
            c = self.compartments[sid]
            return sympy.Float(c.getSize()) if c.isSetSize() or self.level < 3 else None
        if sid in self.parameters:
            p = self.parameters[sid]
            return sympy.Float(p.getValue()) if p.isSetValue() else None
        if sid in self.references:
            ref = self.references[sid]
            return sympy.Float(ref.getStoichiometry()) if ref.isSetStoichiometry() else None
        species = self.species[sid]
        size = self.sym[species.getCompartment()]
        only_amount = species.getHasOnlySubstanceUnits()
        if species.isSetInitialConcentration():
            value = sympy.Float(species.getInitialConcentration())
            return value * size if only_amount else value
        if species.isSetInitialAmount():
            value = sympy.Float(species.getInitialAmount())
            return value if only_amount else value / size
        return None

    def _value(self, symbol: sympy.Symbol, chain: tuple = ()) -> float:
        """Initial value (t = 0) of any symbol, from initial assignments, rules or attributes."""
        cache = self._values
        if symbol in cache:
            return cache[symbol]
        if symbol in self.refused:
            raise self.refused[symbol]
        name = self.origin.get(symbol, symbol.name)
        if symbol in chain:
            cycle = " -> ".join(self.origin[s] for s in (*chain[chain.index(symbol):], symbol))
            raise SbmlProblem(f"initial values depend on each other in a cycle: {cycle}")
        expr = self._initial_expression(symbol)
        if expr is None:
            raise SbmlProblem(f"'{name}' has no value (no size, value or initial amount, "
                              "no initialAssignment and no assignmentRule)")
        values = {s: sympy.Float(self._value(s, (*chain, symbol)))
                  for s in expr.free_symbols if s != TIME}
        values[TIME] = sympy.Integer(0)
        number = expr.xreplace(values).evalf()
        if not number.is_number or not number.is_extended_real or not number.is_finite:
            raise SbmlProblem(f"the initial value of '{name}' is not a finite real number ({number})")
        cache[symbol] = float(number)
        return cache[symbol]

    # --- conservation and outputs ----------------------------------------------

    def _conservation(self) -> tuple[dict[str, sympy.Expr], dict[str, float]]:
        driven = [s for s in self.states if s in self.species and s not in self.rated]
        matrix = [[self.net[s].get(r, 0) for r in self.reactions] for s in driven]
        laws, totals = {}, {}
        for vector in left_null_space(matrix):
            members = [(c, s) for c, s in zip(vector, driven) if c != 0]
            sizes = {s: self.inline(self.sym[self.species[s].getCompartment()]) for _, s in members}
            if any(sizes[s].free_symbols & (self.state_symbols | {TIME}) for _, s in members):
                self.warnings.append("a conservation law over " + ", ".join(s for _, s in members)
                                     + " was left out: a compartment size changes in time")
                continue
            concentration = [s for _, s in members if self._units(s) == "concentration"]
            common = len(concentration) == len(members) and len({sizes[s] for s in concentration}) == 1
            # amounts are what reactions conserve: amount = concentration × size
            expr = sympy.Add(*[c * self.sym[s] * (sizes[s] if s in concentration and not common else 1)
                               for c, s in members])
            total = self._fresh_total(self.name[members[0][1]])
            laws[total] = expr
            totals[total] = float(expr.xreplace({s: sympy.Float(self._value(s))
                                                 for s in expr.free_symbols}))
        return laws, totals

    def _fresh_total(self, stem: str) -> str:
        taken = set(self.name.values()) | {s.name for s in self.local_sym.values()}
        taken |= set(self._totals)
        name, k = f"{stem}_total", 2
        while name in taken:
            name, k = f"{stem}_total_{k}", k + 1
        self._totals.append(name)
        return name

    def _outputs(self, known: set) -> dict[str, str]:
        outputs = {}
        for sid, symbol in self.sym.items():
            expr = self.inline(symbol)
            if expr.free_symbols & ({TIME} | set(self.refused)):
                continue
            try:
                fixed = {s: number(self._value(s)) for s in expr.free_symbols - known}
                outputs[sid] = to_text(expr.xreplace(fixed))
            except SbmlProblem:
                continue
        return outputs

    def _ordered(self, symbols: set) -> list[sympy.Symbol]:
        """Symbols in document order (global ids first, then local parameters)."""
        order = {s: k for k, s in enumerate([*self.sym.values(), *self.local_sym.values()])}
        return sorted(symbols, key=lambda s: order.get(s, len(order)))
