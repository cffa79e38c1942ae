"""An independent oracle for steady states: simulate the model's ODEs with scipy.

For a loaded study: integrate d(state)/dt = f(state) with `scipy.integrate.solve_ivp`
(stiff method, tight tolerances, analytic Jacobian) from the initial state and from
perturbed initial states on the same conservation class, over ever longer horizons,
until each trajectory either settles (then the point is polished into a steady state
with `scipy.optimize.root`, the conservation laws replacing one equation each) or
keeps oscillating with an undamped amplitude. Nothing here uses poise's finders.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import sympy
from scipy.integrate import solve_ivp
from scipy.optimize import lsq_linear, root

from poise.model.conservation import law_vector

RTOL = 1e-9               # tighter makes the error estimate of BDF chase rounding
HORIZONS = tuple(10.0 ** k for k in range(0, 9))  # time units, cumulative
MAX_STEPS = 200_000       # in one horizon: give up (undecided) rather than run for ever
SETTLED = 1e-9           # |f_i| * horizon below this share of the state's size: settled


@dataclass
class Trajectory:
    start: np.ndarray
    outcome: str                  # "settled", "oscillating" or "undecided"
    point: np.ndarray | None = None  # polished steady state where settled
    detail: str = ""


@dataclass
class Oracle:
    states: tuple[str, ...]
    trajectories: list[Trajectory] = field(default_factory=list)


class _Model:
    def __init__(self, study, values=None):
        values = dict(study.nominal_values() if values is None else values)
        self.states = study.states
        symbols = [sympy.Symbol(s, real=True) for s in self.states]
        numbers = {sympy.Symbol(p, real=True): sympy.Float(v) for p, v in values.items()}
        rhs = [study.ode[s].xreplace(numbers) for s in self.states]
        self.f = sympy.lambdify(symbols, rhs, modules="numpy", cse=True)
        jac = sympy.Matrix(rhs).jacobian(sympy.Matrix(symbols))
        self.j = sympy.lambdify(symbols, jac, modules="numpy", cse=True)
        terms = [sum(sympy.Abs(t) for t in sympy.Add.make_args(sympy.expand(e, deep=False)))
                 for e in rhs]
        self.size = sympy.lambdify(symbols, terms, modules="numpy", cse=True)
        laws = [law_vector(c, self.states) for c in study.conserved.values()]
        self.laws = np.array([[float(c) for c in law] for law in laws], dtype=float).reshape(len(laws), len(self.states))
        self.low = np.array([study.domain[s][0] for s in self.states])

    def rhs(self, _t, y):
        return np.asarray(self.f(*y), dtype=float)

    def jacobian(self, _t, y):
        return np.asarray(self.j(*y), dtype=float)


def simulate(study, perturbations: int = 3, seed: int = 0, values=None) -> Oracle:
    """Trajectories from the initial state and `perturbations` perturbed ones."""
    model = _Model(study, values)
    x0 = np.array([study.initial[s] for s in study.states], dtype=float)
    starts = [x0] + _perturbed(model, x0, perturbations, np.random.default_rng(seed))
    oracle = Oracle(states=study.states)
    for start in starts:
        oracle.trajectories.append(_follow(model, start))
    return oracle


def _perturbed(model: _Model, x0: np.ndarray, count: int, rng) -> list[np.ndarray]:
    """Random points near x0 on its conservation class (totals kept), inside the domain."""
    totals = model.laws @ x0
    scale = np.maximum(np.abs(x0), 0.1 * reference(x0))
    found = []
    for _ in range(count):
        wanted = x0 + scale * rng.normal(0.0, 0.5, size=x0.size)
        if not model.laws.size:
            point = np.maximum(wanted, model.low)
        else:
            weight = 1e6
            a = np.vstack([np.eye(x0.size), weight * model.laws])
            b = np.concatenate([wanted, weight * totals])
            lower = np.where(np.isfinite(model.low), model.low, -np.inf)
            point = lsq_linear(a, b, bounds=(lower, np.full(x0.size, np.inf))).x
            if not np.allclose(model.laws @ point, totals, rtol=1e-7, atol=1e-12 * np.abs(totals).max()):
                continue
        found.append(point)
    return found


def _follow(model: _Model, start: np.ndarray) -> Trajectory:
    y, t = start.copy(), 0.0
    ref = reference(start)
    atol = 1e-12 * np.maximum(np.abs(start), 1e-3 * ref)
    for horizon in HORIZONS:
        solution = None
        for method in ("BDF", "LSODA", "Radau"):
            budget = _Budget(model.rhs, MAX_STEPS * 5)
            try:
                with np.errstate(all="ignore"):
                    solution = solve_ivp(budget, (t, horizon), y, method=method, jac=model.jacobian,
                                         rtol=RTOL, atol=atol)  # every step: narrow spikes show
            except (ValueError, _OutOfBudget) as exc:  # a non-finite Jacobian, or endless steps
                solution = None
                detail = str(exc) or f"more than {MAX_STEPS * 5} evaluations by t = {horizon:g}"
                continue
            if solution.success:
                break
        if solution is None:
            return Trajectory(start, "undecided", detail=f"integration failed: {detail}")
        if not solution.success:
            return Trajectory(start, "undecided", detail=f"integration failed: {solution.message}")
        y, t = solution.y[:, -1], horizon
        if _settled(model, y, horizon, ref):
            point = _polish(model, y, ref)
            if point is None:
                return Trajectory(start, "undecided", detail="settled, but root did not converge")
            return Trajectory(start, "settled", point)
        if _oscillating(solution.y):
            return Trajectory(start, "oscillating", detail=f"undamped oscillation by t = {horizon:g}")
        if solution.t.size > MAX_STEPS:
            return Trajectory(start, "undecided", detail=f"more than {MAX_STEPS} steps by t = {horizon:g}")
    return Trajectory(start, "undecided", detail="neither settled nor oscillating by the last horizon")


class _OutOfBudget(Exception):
    pass


class _Budget:
    """The right-hand side, refusing to be called more than `limit` times."""

    def __init__(self, rhs, limit: int):
        self.rhs, self.left = rhs, limit

    def __call__(self, t, y):
        self.left -= 1
        if self.left < 0:
            raise _OutOfBudget()
        return self.rhs(t, y)


def reference(x: np.ndarray) -> float:
    """A size for the model's states: the largest initial value (1 when all are zero)."""
    return float(np.abs(x).max()) or 1.0


def _settled(model: _Model, y: np.ndarray, horizon: float, ref: float) -> bool:
    with np.errstate(all="ignore"):
        rate = np.abs(np.asarray(model.f(*y), dtype=float))
    size = np.maximum(np.abs(y), 1e-9 * max(np.abs(y).max(), ref))
    return bool(np.all(rate * horizon <= SETTLED * 1e3 * size))


def _oscillating(path: np.ndarray) -> bool:
    """Some state swings up and down by a fifth of its range at least four times, and
    the last swings are as large as earlier ones (not a decaying spiral)."""
    for row in path:
        span = row.max() - row.min()
        if span <= 1e-3 * max(np.abs(row).max(), 1e-300):  # rounding wiggles near a steady state
            continue
        peaks = _swings(row, 0.2 * span)
        if len(peaks) >= 4 and peaks[-1] >= 0.9 * peaks[-3]:
            return True
    return False


def _swings(row: np.ndarray, threshold: float) -> list[float]:
    """Heights of the successive maxima (above the series' minimum), with hysteresis:
    a maximum counts once the series has fallen `threshold` below it."""
    peaks, rising, extreme, floor = [], True, row[0], row.min()
    for value in row:
        if rising:
            if value > extreme:
                extreme = value
            elif extreme - value >= threshold:
                peaks.append(extreme - floor)
                rising, extreme = False, value
        elif value < extreme:
            extreme = value
        elif value - extreme >= threshold:
            rising, extreme = True, value
    return peaks


def _polish(model: _Model, y: np.ndarray, ref: float) -> np.ndarray | None:
    """Newton (scipy root) on f = 0 with one equation per conservation law replaced by
    the law itself, so the root stays on the trajectory's class."""
    n = y.size
    replaced = []
    if model.laws.size:
        _q, _r, pivots = _pivot_columns(model.laws)
        replaced = pivots
    totals = model.laws @ y

    def equations(x):
        f = np.asarray(model.f(*x), dtype=float)
        for k, i in enumerate(replaced):
            f[i] = model.laws[k] @ x - totals[k]
        return f

    def jacobian(x):
        j = np.asarray(model.j(*x), dtype=float)
        for k, i in enumerate(replaced):
            j[i] = model.laws[k]
        return j

    # unknowns in units of each state's size, equations in units of their terms' size
    scale = np.maximum(np.abs(y), 1e-12 * max(np.abs(y).max(), ref))
    with np.errstate(all="ignore"):
        rows = np.asarray(model.size(*y), dtype=float)
    for k, i in enumerate(replaced):
        rows[i] = np.abs(model.laws[k]) @ np.abs(y)
    rows = np.where(rows > 0, rows, 1.0)
    with np.errstate(all="ignore"):
        result = root(lambda z: equations(z * scale) / rows, y / scale, method="hybr",
                      jac=lambda z: jacobian(z * scale) * scale[None, :] / rows[:, None],
                      options={"xtol": 1e-14})
    point = result.x * scale
    if not np.all(np.isfinite(point)) or np.max(np.abs(point - y) / scale) > 1e-3:
        return None
    with np.errstate(all="ignore"):
        if np.max(np.abs(equations(point)) / rows) > 1e-9:
            return None
    return point


def _pivot_columns(laws: np.ndarray):
    """One distinct state per law (column pivoting), the equation replaced by that law."""
    from scipy.linalg import qr
    q, r, perm = qr(laws, pivoting=True)
    return q, r, list(perm[:laws.shape[0]])
