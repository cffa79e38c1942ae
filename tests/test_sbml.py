"""Reading SBML into poise's ODEs.

Checked against outside sources:
- the SBML Test Suite's semantic cases (sbmlteam/sbml-test-suite, cases/semantic;
  expected time courses shipped with each case), integrated with scipy's solve_ivp;
- the law of mass action for a Michaelis–Menten network written through libsbml
  (reference: the mass-action ODEs written out by hand below), its conservation law
  and its steady state solved by hand.

Every ODE text goes through the study parser `poise.study.expressions.parse_expression`
before it is turned into numbers.
"""

from __future__ import annotations

import functools
from pathlib import Path

import libsbml
import numpy as np
import pytest
import sympy
from scipy.integrate import solve_ivp

from poise.errors import InputError
from poise.sbml import SbmlModel, read_sbml
from poise.study.expressions import parse_expression
from sbml_builders import add_parameter, add_reaction, add_species, check_ok, new_document, write_document


# --- helpers ---------------------------------------------------------------------

def _symbols(model: SbmlModel) -> dict[str, sympy.Symbol]:
    return {name: sympy.Symbol(name) for name in [*model.states, *model.parameters]}


def _names(model: SbmlModel) -> dict[str, sympy.Expr]:
    """States and parameters as symbols, named sub-expressions as their math."""
    names: dict[str, sympy.Expr] = dict(_symbols(model))
    for name, text in model.let.items():  # each comes after those it uses
        names[name] = parse_expression(text, names)
    return names


def _parsed_odes(model: SbmlModel) -> dict[str, sympy.Expr]:
    names = _names(model)
    return {s: parse_expression(model.ode[s], names) for s in model.states}


def _cases_folder() -> Path | None:
    here = Path(__file__).resolve()
    for candidate in (here.parents[2] / "shared", here.parents[1].parent / "shared",
                      here.parents[1] / "shared"):
        folder = candidate / "data" / "sbml-semantic"
        if folder.is_dir():
            return folder
    return None


CASES_FOLDER = _cases_folder()
CASES = sorted(p.name for p in CASES_FOLDER.iterdir()
               if p.is_dir() and p.name.isdigit()) if CASES_FOLDER else []


def _settings(path: Path) -> dict[str, object]:
    settings: dict[str, object] = {}
    for line in path.read_text().splitlines():
        if ":" not in line:
            continue
        key, value = (part.strip() for part in line.split(":", 1))
        if key in ("variables", "amount", "concentration"):
            settings[key] = [v.strip() for v in value.split(",") if v.strip()]
        elif key in ("start", "duration", "absolute", "relative"):
            settings[key] = float(value)
    return settings


def _species_info(xml: Path) -> dict[str, tuple[str, bool]]:
    """species id -> (compartment id, whether its value is an amount); metadata only.

    SBML L3V2 section 4.6.5: the value is an amount with hasOnlySubstanceUnits, and in
    a zero-dimensional compartment (which has no size)."""
    model = libsbml.readSBMLFromFile(str(xml)).getModel()
    point = {c.getId() for c in model.getListOfCompartments()
             if c.isSetSpatialDimensions() and c.getSpatialDimensionsAsDouble() == 0}
    return {s.getId(): (s.getCompartment(), s.getHasOnlySubstanceUnits() or s.getCompartment() in point)
            for s in model.getListOfSpecies()}


def _results(path: Path) -> tuple[list[str], np.ndarray]:
    lines = path.read_text().splitlines()
    header = [name.strip() for name in lines[0].split(",")]
    rows = [[float(v) for v in line.split(",")] for line in lines[1:] if line.strip()]
    return header, np.array(rows, dtype=float)


# What a refusal must name: the construct poise does not take (SBML element or math).
CONSTRUCTS = ("factorial", "floor", "ceiling", "quotient", "rem", "time", "delay", "rateOf",
              "stoichiometry", "algebraicRule", "fast", "conversionFactor", "arcsin", "arccos",
              "arctan", "arcsec", "arccsc", "arccot", "cannot be used", "true/false")


@functools.lru_cache(maxsize=None)
def _run_case(case: str) -> tuple[str, str]:
    """Simulate one test-suite case: ("pass", ""), ("refused", message) when poise
    declines a construct by name, or ("wrong", what differs)."""
    folder = CASES_FOLDER / case
    settings = _settings(folder / f"{case}-settings.txt")
    xml = folder / f"{case}-sbml-l3v2.xml"
    try:
        model = read_sbml(xml)
    except InputError as exc:
        return "refused", f"not supported by poise: {exc.problem}"
    header, table = _results(folder / f"{case}-results.csv")
    times = table[:, 0]  # the first column is time ("time" or "Time")

    names = _symbols(model)
    state_symbols = [names[s] for s in model.states]
    parameter_symbols = [names[p] for p in model.parameters]
    values = [model.parameters[p] for p in model.parameters]
    arguments = [*state_symbols, *parameter_symbols]

    if model.states:
        odes = _parsed_odes(model)
        rhs = sympy.lambdify(arguments, [odes[s] for s in model.states], "numpy")
        y0 = [model.initial[s] for s in model.states]
        span = (settings["start"], settings["start"] + settings["duration"])
        for method in ("LSODA", "Radau"):
            solution = solve_ivp(lambda t, y: np.array(rhs(*y, *values), dtype=float), span, y0,
                                 method=method, t_eval=times, rtol=1e-10, atol=1e-12)
            if solution.success:
                break
        else:
            return "wrong", f"integration failed: {solution.message}"
        trajectory = list(solution.y)
    else:
        trajectory = []

    def evaluate(sbml_id: str) -> np.ndarray:
        expr = parse_expression(model.outputs[sbml_id], names)
        function = sympy.lambdify(arguments, expr, "numpy")
        return np.broadcast_to(np.asarray(function(*trajectory, *values), dtype=float),
                               times.shape)

    species = _species_info(xml)
    for variable in settings["variables"]:
        if variable not in model.outputs:
            verdict = "refused" if model.warnings else "wrong"
            return verdict, f"no value for '{variable}': " + "; ".join(model.warnings)
        actual = evaluate(variable)
        if variable in species:
            compartment, only_amount = species[variable]
            if variable in settings["amount"] and not only_amount:
                actual = actual * evaluate(compartment)
            elif variable in settings["concentration"] and only_amount:
                actual = actual / evaluate(compartment)
        expected = table[:, header.index(variable)]
        allowed = settings["absolute"] + settings["relative"] * np.abs(expected)
        bad = np.flatnonzero(~(np.abs(actual - expected) <= allowed))
        if bad.size:
            k = bad[0]
            return "wrong", (f"'{variable}' at t={times[k]}: got {actual[k]:.10g}, "
                             f"expected {expected[k]:.10g}")
    return "pass", ""


# --- the SBML Test Suite -----------------------------------------------------------

@pytest.mark.skipif(not CASES, reason="SBML Test Suite cases not found beside the repository")
@pytest.mark.parametrize("case", CASES)
def test_sbml_test_suite_case(case):
    # source: SBML Test Suite, cases/semantic/<case> (expected results shipped with it);
    # a case poise reads must reproduce them, any other is refused naming its construct
    verdict, reason = _run_case(case)
    assert verdict != "wrong", f"case {case}: {reason}"
    if verdict == "refused":
        assert any(word in reason for word in CONSTRUCTS), reason
        pytest.skip(f"case {case}: {reason}")


@pytest.mark.skipif(not CASES, reason="SBML Test Suite cases not found beside the repository")
def test_at_least_95_percent_of_the_test_suite_cases_pass():
    # requirement of issue 15 (>= 95 % of the 597 cases); reasons are in the skip messages above
    results = {case: _run_case(case) for case in CASES}
    failed = {case: reason for case, (verdict, reason) in results.items() if verdict != "pass"}
    assert len(failed) <= 0.05 * len(CASES), failed


# --- Michaelis–Menten network written through libsbml ------------------------------

MM_VALUES = {"k_on": 2.0, "k_off": 0.5, "k_cat": 0.8, "k_in": 0.3, "k_out": 0.4}
MM_INITIAL = {"E": 1.0, "S": 2.0, "C": 0.25, "P": 0.0}
CELL_SIZE = 2.5


def _write_michaelis_menten(path: Path, level: int, version: int) -> Path:
    """E + S <-> C -> E + P, with inflow of S and outflow of P (mass action).

    Kinetic laws are in substance per time (concentration × compartment size), as
    SBML prescribes; the catalytic constant is a local parameter of its reaction.
    """
    document = libsbml.SBMLDocument(level, version)
    model = document.createModel()
    model.setId("michaelis_menten")
    cell = model.createCompartment()
    cell.setId("cell")
    cell.setSize(CELL_SIZE)
    cell.setConstant(True)
    for sid, value in MM_INITIAL.items():
        species = model.createSpecies()
        species.setId(sid)
        species.setCompartment("cell")
        species.setInitialConcentration(value)
        species.setHasOnlySubstanceUnits(False)
        species.setBoundaryCondition(False)
        species.setConstant(False)
    for pid in ("k_on", "k_off", "k_in", "k_out"):
        parameter = model.createParameter()
        parameter.setId(pid)
        parameter.setValue(MM_VALUES[pid])
        parameter.setConstant(True)

    def reaction(rid, reactants, products, formula, local=None):
        r = model.createReaction()
        r.setId(rid)
        r.setReversible(False)
        if level < 3 or version < 2:
            r.setFast(False)
        for sid in reactants:
            ref = r.createReactant()
            ref.setSpecies(sid)
            ref.setStoichiometry(1)
            if level == 3:
                ref.setConstant(True)
        for sid in products:
            ref = r.createProduct()
            ref.setSpecies(sid)
            ref.setStoichiometry(1)
            if level == 3:
                ref.setConstant(True)
        law = r.createKineticLaw()
        for pid, value in (local or {}).items():
            p = law.createLocalParameter() if level == 3 else law.createParameter()
            p.setId(pid)
            p.setValue(value)
        law.setMath(libsbml.parseL3Formula(formula))

    reaction("binding", ["E", "S"], ["C"], "cell * k_on * E * S")
    reaction("unbinding", ["C"], ["E", "S"], "cell * k_off * C")
    reaction("catalysis", ["C"], ["E", "P"], "cell * k_cat * C", {"k_cat": MM_VALUES["k_cat"]})
    reaction("inflow", [], ["S"], "cell * k_in")
    reaction("outflow", ["P"], [], "cell * k_out * P")
    assert document.getNumErrors(libsbml.LIBSBML_SEV_ERROR) == 0
    file = path / f"mm_l{level}v{version}.xml"
    assert libsbml.writeSBMLToFile(document, str(file))
    return file


@pytest.mark.parametrize("level, version", [(3, 2), (2, 4)])
def test_michaelis_menten_matches_mass_action(tmp_path, level, version):
    model = read_sbml(_write_michaelis_menten(tmp_path, level, version))
    # local parameter k_cat of reaction "catalysis" is renamed <reaction>_<parameter>
    assert set(model.states) == {"E", "S", "C", "P"}
    assert set(model.parameters) >= {"k_on", "k_off", "catalysis_k_cat", "k_in", "k_out"}
    odes = _parsed_odes(model)
    E, S, C, P, k_on, k_off, k_cat, k_in, k_out = sympy.symbols(
        "E S C P k_on k_off catalysis_k_cat k_in k_out")
    # reference: law of mass action, each rate = constant × product of reactant concentrations
    v_bind, v_unbind, v_cat, v_in, v_out = k_on * E * S, k_off * C, k_cat * C, k_in, k_out * P
    expected = {"E": -v_bind + v_unbind + v_cat,
                "S": v_in - v_bind + v_unbind,
                "C": v_bind - v_unbind - v_cat,
                "P": v_cat - v_out}
    for state, rhs in expected.items():
        assert sympy.simplify(odes[state] - rhs) == 0, state

    # E + C is conserved (the enzyme is free or bound); its total comes from the initial state
    names = _symbols(model)
    laws = {t: parse_expression(text, names) for t, text in model.conserved.items()}
    matches = [t for t, law in laws.items() if sympy.simplify(law / (E + C)).is_number]
    assert len(matches) == 1 and len(laws) == 1
    ratio = float(sympy.simplify(laws[matches[0]] / (E + C)))
    assert model.parameters[matches[0]] == pytest.approx(
        ratio * (MM_INITIAL["E"] + MM_INITIAL["C"]))

    assert model.initial == pytest.approx(MM_INITIAL)
    assert model.units == {s: "concentration" for s in MM_INITIAL}
    assert model.size == {s: CELL_SIZE for s in MM_INITIAL}
    for name, value in MM_VALUES.items():
        key = "catalysis_k_cat" if name == "k_cat" else name
        assert model.parameters[key] == value


def test_michaelis_menten_steady_state_solved_by_hand(tmp_path):
    # source: analytic steady state of the network (solved by hand from the mass-action ODEs):
    # inflow = catalysis gives C* = k_in/k_cat, outflow gives P* = k_in/k_out,
    # E* = E_total - C*, and binding balance gives S* = (k_off + k_cat) C*/(k_on E*).
    model = read_sbml(_write_michaelis_menten(tmp_path, 3, 2))
    odes = _parsed_odes(model)
    names = _symbols(model)
    values = {names[p]: v for p, v in model.parameters.items()}
    total = MM_INITIAL["E"] + MM_INITIAL["C"]
    v = MM_VALUES
    c_star = v["k_in"] / v["k_cat"]
    e_star = total - c_star
    point = {names["C"]: c_star, names["P"]: v["k_in"] / v["k_out"], names["E"]: e_star,
             names["S"]: (v["k_off"] + v["k_cat"]) * c_star / (v["k_on"] * e_star)}
    for state, rhs in odes.items():
        assert float(rhs.xreplace({**values, **point})) == pytest.approx(0.0, abs=1e-12), state
    # and the point is not a steady state of a perturbed system (the check can fail)
    moved = {**point, names["S"]: point[names["S"]] * 1.1}
    assert abs(float(odes["S"].xreplace({**values, **moved}))) > 1e-3


# --- other SBML constructs ------------------------------------------------------------

def test_reserved_ids_are_renamed_and_functions_and_rules_inlined(tmp_path):
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_species(model, "B", 0.0)
    add_parameter(model, "exp", 2.0)          # clashes with a poise function
    add_parameter(model, "lambda", 3.0)       # a Python keyword
    add_parameter(model, "v", 0.0, constant=False)
    rule = model.createAssignmentRule()
    rule.setVariable("v")
    rule.setMath(libsbml.parseL3Formula("lambda * A"))
    function = model.createFunctionDefinition()
    function.setId("saturate")
    function.setMath(libsbml.parseL3Formula("lambda(x, K, x / (K + x))"))
    add_reaction(model, "R", ["A"], ["B"], "exp * saturate(v, 4) * cell")
    model_data = read_sbml(write_document(document, tmp_path))
    assert "exp_" in model_data.parameters and "lambda_" in model_data.parameters
    assert model_data.outputs["exp"] == "exp_"
    odes = _parsed_odes(model_data)
    A, B, exp_, lambda_ = sympy.symbols("A B exp_ lambda_")
    # reference: the rate written out by hand with the function and the rule substituted
    rate = exp_ * (lambda_ * A) / (4 + lambda_ * A)
    assert sympy.simplify(odes["A"] + rate) == 0
    assert sympy.simplify(odes["B"] - rate) == 0


def test_rate_rule_makes_a_parameter_a_state_and_boundary_species_is_fixed(tmp_path):
    document, model = new_document()
    add_species(model, "X", 1.0)
    add_species(model, "Feed", 5.0, boundary=True)
    add_parameter(model, "k", 0.5)
    add_parameter(model, "w", 1.0, constant=False)
    rule = model.createRateRule()
    rule.setVariable("w")
    rule.setMath(libsbml.parseL3Formula("-k * w"))
    assignment = model.createInitialAssignment()
    assignment.setSymbol("k")
    assignment.setMath(libsbml.parseL3Formula("Feed / 10"))
    add_reaction(model, "supply", ["Feed"], ["X"], "w * Feed * cell")
    data = read_sbml(write_document(document, tmp_path))
    assert data.states == ("X", "w")
    assert data.parameters["Feed"] == 5.0
    assert data.parameters["k"] == pytest.approx(0.5)  # from the initial assignment 5/10
    odes = _parsed_odes(data)
    X, w, k, Feed = sympy.symbols("X w k Feed")
    assert sympy.simplify(odes["w"] + k * w) == 0
    assert sympy.simplify(odes["X"] - w * Feed) == 0
    assert data.units == {"X": "concentration"}
    # reference, by hand: d/dt (X + (Feed/k)*w) = Feed*w - Feed*w = 0, and Feed/k = 10 at the
    # file's values; the law needs those two values, so a study that varies either drops it
    assert data.conserved == {"X_total": "X + 10*w"}
    assert data.conserved_requires == {"X_total": ("Feed", "k")}


def test_events_are_ignored_with_a_warning(tmp_path):
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_parameter(model, "k", 1.0)
    add_reaction(model, "decay", ["A"], [], "k * A * cell")
    event = model.createEvent()
    event.setId("pulse")
    event.setUseValuesFromTriggerTime(True)
    trigger = event.createTrigger()
    trigger.setInitialValue(False)
    trigger.setPersistent(True)
    trigger.setMath(libsbml.parseL3Formula("A < 0.5"))
    data = read_sbml(write_document(document, tmp_path))
    assert any("pulse" in w for w in data.warnings)
    A, k = sympy.symbols("A k")
    assert _parsed_odes(data) == {"A": -A * k}


# --- errors --------------------------------------------------------------------------------

def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError) as caught:
        read_sbml(tmp_path / "absent.xml")
    assert caught.value.key == "sbml" and "absent.xml" in str(caught.value)


def test_not_xml_is_an_input_error(tmp_path):
    file = tmp_path / "model.xml"
    file.write_text("this is not XML at all {")
    with pytest.raises(InputError, match="not a readable SBML file"):
        read_sbml(file)


def test_piecewise_kinetics_is_read_as_a_piecewise(tmp_path):
    # source: SBML L3V2 specification, section 3.4 (MathML piecewise: the value of the
    # first piece whose condition holds, else the otherwise value)
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_parameter(model, "K", 0.5)
    add_reaction(model, "switch_on", ["A"], [], "piecewise(2 * A, A > K, A) * cell")
    data = read_sbml(write_document(document, tmp_path))
    rate = -_parsed_odes(data)["A"]
    A, K = sympy.symbols("A K")
    assert rate.subs({A: 1.0, K: 0.5}) == 2.0 and rate.subs({A: 0.25, K: 0.5}) == 0.25


def test_algebraic_rule_names_the_rule(tmp_path):
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_parameter(model, "q", 1.0, constant=False)
    rule = model.createAlgebraicRule()
    rule.setIdAttribute("balance")
    rule.setMath(libsbml.parseL3Formula("q - 2 * A"))
    add_reaction(model, "decay", ["A"], [], "A * cell")
    with pytest.raises(InputError, match="algebraicRule 'balance'"):
        read_sbml(write_document(document, tmp_path))


def test_time_dependent_rate_names_the_rule_it_comes_through(tmp_path):
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_parameter(model, "drive", 0.0, constant=False)
    rule = model.createAssignmentRule()
    rule.setVariable("drive")
    rule.setMath(libsbml.parseL3Formula("2 * time"))
    add_reaction(model, "forced", [], ["A"], "drive * cell")
    with pytest.raises(InputError, match="forced.*drive"):
        read_sbml(write_document(document, tmp_path))


def test_cyclic_assignment_rules_are_refused(tmp_path):
    document, model = new_document()
    add_species(model, "A", 1.0)
    for pid, formula in (("p", "q + 1"), ("q", "p * 2")):
        add_parameter(model, pid, 0.0, constant=False)
        rule = model.createAssignmentRule()
        rule.setVariable(pid)
        rule.setMath(libsbml.parseL3Formula(formula))
    add_reaction(model, "decay", ["A"], [], "p * A * cell")
    with pytest.raises(InputError, match="cycle"):
        read_sbml(write_document(document, tmp_path))


def test_growing_compartment_dilutes_concentrations(tmp_path):
    # source: analytic — reactions change the amount n = c·V, so by the quotient rule
    # dc/dt = (dn/dt)/V - c·(dV/dt)/V; with dn/dt = -k·n and dV/dt = g·V this is -(k + g)·c.
    document, model = new_document()
    model.getCompartment("cell").setConstant(False)
    add_species(model, "A", 2.0)
    add_parameter(model, "k", 0.3)
    add_parameter(model, "g", 0.1)
    rule = model.createRateRule()
    rule.setVariable("cell")
    rule.setMath(libsbml.parseL3Formula("g * cell"))
    add_reaction(model, "decay", ["A"], [], "k * A * cell")
    data = read_sbml(write_document(document, tmp_path))
    assert data.states == ("A", "cell")
    odes = _parsed_odes(data)
    A, cell, k, g = sympy.symbols("A cell k g")
    assert sympy.simplify(odes["A"] + (k + g) * A) == 0
    assert sympy.simplify(odes["cell"] - g * cell) == 0
    assert data.conserved == {}


def test_unused_unsupported_rule_is_only_a_warning(tmp_path):
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_parameter(model, "flag", 0.0, constant=False)
    rule = model.createAssignmentRule()
    rule.setVariable("flag")
    rule.setMath(libsbml.parseL3Formula("floor(A)"))
    add_reaction(model, "decay", ["A"], [], "A * cell")
    data = read_sbml(write_document(document, tmp_path))
    assert _parsed_odes(data) == {"A": -sympy.Symbol("A")}
    assert any("flag" in w and "floor" in w for w in data.warnings)


def test_bundled_enzyme_reactor_example_is_mass_action():
    # reference: law of mass action for the reactions listed in configs/sbml_enzyme/make_model.py
    file = Path(__file__).resolve().parents[1] / "configs" / "sbml_enzyme" / "model.xml"
    data = read_sbml(file)
    odes = _parsed_odes(data)
    S, P, E, C, CSS, D, S_feed, kb, ku, kc, kl, kul = sympy.symbols(
        "S P E C CSS D S_feed k_bind k_unbind k_cat k_lock k_unlock")
    bind, unbind, cat, lock, unlock = kb * E * S, ku * C, kc * C, kl * C * S, kul * CSS
    expected = {"S": D * S_feed - D * S - bind + unbind - lock + unlock,
                "P": cat - D * P,
                "E": -bind + unbind + cat,
                "C": bind - unbind - cat - lock + unlock,
                "CSS": lock - unlock}
    assert set(odes) == set(expected)
    for state, rhs in expected.items():
        assert sympy.simplify(odes[state] - rhs) == 0, state
    names = _symbols(data)
    (total, law), = data.conserved.items()
    assert sympy.simplify(parse_expression(law, names) - (E + C + CSS)) == 0
    # the initial assignment loads 1 mmol of enzyme into the 2-litre tank
    assert data.initial["E"] == pytest.approx(0.5) and data.parameters[total] == pytest.approx(0.5)
    assert data.parameters["S_feed"] == 10.0 and data.size["S"] == 2.0


MATHML = """<math xmlns="http://www.w3.org/1998/Math/MathML">
  <apply><plus/>
    <apply><log/><ci>x</ci></apply>
    <apply><log/><logbase><cn type="integer">2</cn></logbase><ci>x</ci></apply>
    <apply><ln/><ci>x</ci></apply>
    <apply><root/><degree><cn type="integer">3</cn></degree><ci>x</ci></apply>
    <apply><root/><ci>x</ci></apply>
    <apply><power/><ci>x</ci><cn type="rational">1<sep/>3</cn></apply>
    <apply><times/><cn type="e-notation">1.5<sep/>-3</cn><exponentiale/></apply>
    <apply><times/><pi/><apply><sec/><ci>x</ci></apply></apply>
    <apply><cosh/><ci>x</ci></apply>
    <apply><abs/><apply><minus/><ci>x</ci></apply></apply>
    <apply><max/><ci>x</ci><cn>0.5</cn></apply>
    <apply><divide/><apply><exp/><ci>x</ci></apply><apply><tanh/><ci>x</ci></apply></apply>
  </apply>
</math>"""


def test_math_functions_follow_the_mathml_definitions(tmp_path):
    # source: MathML 2.0 content markup as used by SBML (log without logbase is base 10,
    # root without degree is the square root, rational and e-notation numbers)
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_parameter(model, "x", 1.7)
    reaction = add_reaction(model, "R", ["A"], [], "1")
    reaction.getKineticLaw().setMath(libsbml.readMathMLFromString(MATHML))
    data = read_sbml(write_document(document, tmp_path))
    names = _names(data)
    x = names["x"]
    rate = -parse_expression(data.ode["A"], names).subs(
        {names[p]: v for p, v in data.parameters.items() if p != "x"})
    expected = (sympy.log(x, 10) + sympy.log(x, 2) + sympy.log(x) + x ** sympy.Rational(1, 3)
                + sympy.sqrt(x) + x ** sympy.Rational(1, 3) + 1.5e-3 * sympy.E
                + sympy.pi / sympy.cos(x) + sympy.cosh(x) + sympy.Abs(x) + sympy.Max(x, 0.5)
                + sympy.exp(x) / sympy.tanh(x))
    for value in (0.3, 1.7, 4.0):
        assert float(rate.subs(x, value)) == pytest.approx(float(expected.subs(x, value)), rel=1e-12)


@pytest.mark.parametrize("formula, construct", [
    ("floor(A) * cell", "floor"), ("delay(A, 1) * cell", "delay"),
    ("arcsin(A) * cell", "arcsin"), ("A * cell * time", "time")])
def test_unsupported_math_names_the_reaction(tmp_path, formula, construct):
    document, model = new_document()
    add_species(model, "A", 0.5)
    add_reaction(model, "odd_rate", ["A"], [], formula)
    with pytest.raises(InputError, match="odd_rate") as caught:
        read_sbml(write_document(document, tmp_path))
    assert construct in caught.value.problem


def test_fast_reaction_and_conversion_factor_are_refused(tmp_path):
    older, model = new_document(version=1)  # fast is an attribute up to Level 3 Version 1
    add_species(model, "A", 1.0)
    check_ok(add_reaction(model, "quick", ["A"], [], "A * cell").setFast(True))
    with pytest.raises(InputError, match="reaction 'quick' is fast"):
        read_sbml(write_document(older, tmp_path, "fast.xml"))
    document, model = new_document()
    add_species(model, "A", 1.0)
    add_reaction(model, "decay", ["A"], [], "A * cell")
    add_parameter(model, "scale", 2.0)
    check_ok(model.getSpecies("A").setConversionFactor("scale"))
    with pytest.raises(InputError, match="conversionFactor of species 'A'"):
        read_sbml(write_document(document, tmp_path, "factor.xml"))


@pytest.mark.parametrize("level, version", [(3, 2), (2, 4)])
def test_sbml_study_and_hand_written_study_have_the_same_steady_states(tmp_path, level, version):
    # reference: the same network typed by hand as a study file (law of mass action);
    # both go through poise's loader and finder, and must agree state by state.
    from poise.inspect import inspect_point
    from poise.study.loader import load_study

    file = _write_michaelis_menten(tmp_path, level, version)
    imported = load_study(_study(tmp_path, "from_sbml.toml", f'[model]\nsbml = "{file.name}"\n'))
    total = MM_INITIAL["E"] + MM_INITIAL["C"]
    v = MM_VALUES
    by_hand = load_study(_study(tmp_path, "by_hand.toml", f"""
[model]
states = ["E", "S", "C", "P"]
[model.ode]
E = "-k_on*E*S + k_off*C + k_cat*C"
S = "k_in - k_on*E*S + k_off*C"
C = "k_on*E*S - k_off*C - k_cat*C"
P = "k_cat*C - k_out*P"
[model.conserved]
E_total = "E + C"
[parameters]
k_on = {v['k_on']}
k_off = {v['k_off']}
k_cat = {v['k_cat']}
k_in = {v['k_in']}
k_out = {v['k_out']}
E_total = {total}
"""))
    a = inspect_point(imported)["equilibria"]
    b = inspect_point(by_hand)["equilibria"]
    assert len(a) == len(b) == 1
    for state in ("E", "S", "C", "P"):
        assert a[0]["state"][state] == pytest.approx(b[0]["state"][state], rel=1e-9)
    assert a[0]["class"] == b[0]["class"]
    assert sorted(re for re, _ in a[0]["eigenvalues"]) == pytest.approx(
        sorted(re for re, _ in b[0]["eigenvalues"]), rel=1e-7)


def _study(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text)
    return path
