"""An independent oracle for steady states: simulate the model's ODEs with scipy.

For a loaded study, the right-hand side and its Jacobian come from poise's compiled
kernels for the model on its conservation class (the same equations poise solves;
the import itself is checked against the SBML Test Suite). Everything else is
scipy's: `scipy.integrate.solve_ivp` (stiff BDF, falling back to LSODA and Radau;
tight tolerances; the analytic Jacobian) from the initial state and from perturbed
initial states on the same conservation class, over ever longer horizons, until each
trajectory either settles (the end point is then polished into a steady state with
`scipy.optimize.root`) or keeps oscillating with an undamped amplitude. Nothing here
uses poise's finders or its stability classification.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import root

from poise.model import compile_model

RTOL = 1e-9               # tighter makes the error estimate of BDF chase rounding
HORIZONS = tuple(10.0 ** k for k in range(0, 7))  # time units, cumulative
MAX_EVALUATIONS = 60_000  # right-hand sides per horizon: give up (undecided) beyond
SETTLED = 1e-6            # |f_i| * horizon below this share of the state's size: settled
TRIES = 20                # random draws per perturbed start before giving up on it


@dataclass
class Trajectory:
    start: np.ndarray                # every state (the model's column order)
    outcome: str                     # "settled", "oscillating" or "undecided"
    point: np.ndarray | None = None  # polished steady state (every state) where settled
    degenerate: bool = False         # the settled point's Jacobian is singular (a continuum)
    detail: str = ""


@dataclass
class Oracle:
    states: tuple[str, ...]
    trajectories: list[Trajectory] = field(default_factory=list)


class _Model:
    """The reduced right-hand side f(x) of the free states and its Jacobian, at one
    parameter point; `full` maps free states to every state."""

    def __init__(self, study, values=None):
        self.compiled = compile_model(study, values, varying=())
        self.kernels = self.compiled.kernels
        self.free = np.asarray(self.kernels.free_columns, dtype=int)
        self.low = self.compiled.domain_low
        self.high = self.compiled.domain_high
        self.evaluations = 0

    def f(self, x: np.ndarray) -> np.ndarray:
        self.evaluations += 1
        return self.kernels.rhs(x[None, :], np.zeros((1, 0)))[0]

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        return self.kernels.jacobian(x[None, :], np.zeros((1, 0)))[0]

    def size(self, x: np.ndarray) -> np.ndarray:
        """The sum of |terms| of each equation: the scale its residual is judged by."""
        return self.kernels.term_size(x[None, :], np.zeros((1, 0)))[0]

    def full(self, x: np.ndarray) -> np.ndarray:
        return self.kernels.full_states(x[None, :], np.zeros((1, 0)))[0]

    def inside(self, full: np.ndarray) -> bool:
        return bool(np.all(np.isfinite(full)) and np.all(full >= self.low) and np.all(full <= self.high))


def simulate(study, perturbations: int = 3, seed: int = 0, values=None) -> Oracle:
    """Trajectories from the initial state and `perturbations` perturbed ones (same
    conservation class: the eliminated states follow from the totals)."""
    model = _Model(study, values)
    x0 = np.array([study.initial[s] for s in study.states], dtype=float)[model.free]
    starts = [x0] + _perturbed(model, x0, perturbations, np.random.default_rng(seed))
    oracle = Oracle(states=tuple(study.states))
    for start in starts:
        oracle.trajectories.append(_follow(model, start))
    return oracle


def _perturbed(model: _Model, x0: np.ndarray, count: int, rng) -> list[np.ndarray]:
    """Random points near x0 (each free state scaled by up to a factor of about 2 and
    moved by up to a tenth of the largest state), whose every state is in the domain."""
    reach = 0.1 * reference(model.full(x0))
    found = []
    for _ in range(count):
        for attempt in range(TRIES):
            shrink = 0.5 ** (attempt // 5)   # smaller moves when the domain keeps refusing
            factor = np.exp(shrink * rng.normal(0.0, 0.5, size=x0.size))
            shift = shrink * reach * rng.uniform(-1.0, 1.0, size=x0.size)
            point = x0 * factor + shift
            if model.inside(model.full(point)):
                found.append(point)
                break
    return found


def _follow(model: _Model, start: np.ndarray) -> Trajectory:
    y, t = start.copy(), 0.0
    full_start = model.full(start)
    ref = reference(full_start)
    atol = 1e-12 * np.maximum(np.abs(start), 1e-3 * ref)
    fun = lambda _t, x: model.f(x)              # noqa: E731
    jac = lambda _t, x: model.jacobian(x)       # noqa: E731
    for horizon in HORIZONS:
        solution, detail = None, ""
        for method in ("BDF", "LSODA", "Radau"):
            model.evaluations = 0
            try:
                with np.errstate(all="ignore"):
                    solution = solve_ivp(_budgeted(fun, model), (t, horizon), y, method=method,
                                         jac=jac, rtol=RTOL, atol=atol)
            except (ValueError, _OutOfBudget) as exc:  # a non-finite Jacobian, or endless steps
                solution = None
                detail = str(exc) or f"more than {MAX_EVALUATIONS} evaluations by t = {horizon:g}"
                continue
            if solution.success:
                break
            detail = solution.message
        if solution is None or not solution.success:
            return Trajectory(model.full(start), "undecided", detail=f"integration failed: {detail}")
        y, t = solution.y[:, -1], horizon
        if _settled(model, y, horizon, ref):
            point = _polish(model, y, ref)
            if point is None:
                return Trajectory(model.full(start), "undecided", detail="settled, but root did not converge")
            return Trajectory(model.full(start), "settled", model.full(point),
                              degenerate=_degenerate(model, point))
        if _oscillating(solution.y, ref):
            return Trajectory(model.full(start), "oscillating", detail=f"undamped oscillation by t = {horizon:g}")
    return Trajectory(model.full(start), "undecided", detail="neither settled nor oscillating by the last horizon")


class _OutOfBudget(Exception):
    pass


def _budgeted(fun, model: _Model):
    def limited(t, x):
        if model.evaluations > MAX_EVALUATIONS:
            raise _OutOfBudget()
        return fun(t, x)
    return limited


def reference(x: np.ndarray) -> float:
    """A size for the model's states: the largest |value| (1 when all are zero)."""
    return float(np.abs(x).max(initial=0.0)) or 1.0


def _settled(model: _Model, y: np.ndarray, horizon: float, ref: float) -> bool:
    """Over another span as long as the time so far, no state would move by more than
    a millionth of its size (sizes at least 1e-9 of the largest state)."""
    with np.errstate(all="ignore"):
        rate = np.abs(model.f(y))
    size = np.maximum(np.abs(y), 1e-9 * max(np.abs(y).max(initial=0.0), ref))
    return bool(np.all(rate * horizon <= SETTLED * size))


def _oscillating(path: np.ndarray, ref: float) -> bool:
    """Some state swings up and down by a fifth of its range at least four times, and
    the last swings are as large as earlier ones (not a decaying spiral). Swings of a
    thousandth of the state's size, or of 1e-9 of the largest state, are rounding
    noise around a steady state, not an oscillation."""
    for row in path:
        span = row.max() - row.min()
        if span <= max(1e-3 * np.abs(row).max(), 1e-9 * ref):
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
    """scipy's root (hybrid Powell) on f = 0 from the trajectory's end, in units of each
    state's size, each equation in units of its terms' size; None if it moves away or
    leaves a residual above 1e-9 of the terms."""
    scale = np.maximum(np.abs(y), 1e-12 * max(np.abs(y).max(initial=0.0), ref))
    with np.errstate(all="ignore"):
        rows = model.size(y)
    rows = np.where(rows > 0, rows, 1.0)
    with np.errstate(all="ignore"):
        result = root(lambda z: model.f(z * scale) / rows, y / scale, method="hybr",
                      jac=lambda z: model.jacobian(z * scale) * scale[None, :] / rows[:, None],
                      options={"xtol": 1e-14})
    point = result.x * scale
    if not np.all(np.isfinite(point)) or np.max(np.abs(point - y) / scale, initial=0.0) > 1e-3:
        return None
    with np.errstate(all="ignore"):
        if np.max(np.abs(model.f(point)) / rows, initial=0.0) > 1e-9:
            return None
    return point


def _degenerate(model: _Model, point: np.ndarray) -> bool:
    """Whether the Jacobian at a settled point has an eigenvalue at zero (relative to its
    largest, common practice, no source): the point then lies on a continuum of steady
    states, which a trajectory reaches at a point set by where it started."""
    if point.size == 0:
        return False
    scale = np.maximum(np.abs(point), 1e-9 * reference(point))
    with np.errstate(all="ignore"):
        jac = model.jacobian(point) * scale[None, :] / scale[:, None]  # in the states' own units
        values = np.abs(np.linalg.eigvals(jac))
    return bool(values.min() <= 1e-10 * max(values.max(), 1e-300))
