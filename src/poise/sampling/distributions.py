"""Parameter distributions of the ``[parameters]`` table.

A parameter is either a number (fixed) or an inline table naming a distribution::

    K = { dist = "uniform", low = 2, high = 10 }

`check_parameter` validates one entry and returns every problem it finds (so the
study reader can report them with file, table and key); `make_distribution` turns a
valid entry into a `Distribution`, whose `ppf` maps points of the unit interval to
parameter values through scipy.stats inverse CDFs.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import cached_property
from numbers import Real

import numpy as np
from scipy import stats

from poise.errors import InputError

# dist name -> (required keys, optional keys); `nominal` is optional for every kind.
DISTRIBUTIONS: Mapping[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "uniform": (("low", "high"), ("nominal",)),
    "loguniform": (("low", "high"), ("nominal",)),
    "normal": (("mean", "sd"), ("low", "high", "nominal")),
    "lognormal": (("median", "gsd"), ("nominal",)),
    "triangular": (("low", "mode", "high"), ("nominal",)),
}

# A truncated normal whose window holds less probability than this is refused:
# its inverse CDF is numerically meaningless (common practice, no source).
_NEGLIGIBLE_MASS = 1e-12


def _is_number(value: object) -> bool:
    return isinstance(value, Real) and not isinstance(value, bool)


def _known() -> str:
    return ", ".join(DISTRIBUTIONS)


def check_parameter(name: str, value: object) -> list[tuple[str, str]]:
    """Validate one ``[parameters]`` entry.

    Parameters
    ----------
    name : str
        The parameter name (used to build the keys of the problems).
    value : object
        The value read from the study file: a number or a mapping.

    Returns
    -------
    list of (str, str)
        ``(key, problem)`` pairs, e.g. ``("K.low", "low must be below high ...")``;
        empty when the entry is valid.
    """
    if isinstance(value, bool):
        return [(name, "must be a number or a distribution table, not true/false")]
    if _is_number(value):
        if not math.isfinite(float(value)):
            return [(name, f"must be a finite number, got {value}")]
        return []
    if not isinstance(value, Mapping):
        return [(name, "must be a number or a distribution table such as "
                       "{ dist = \"uniform\", low = 1, high = 2 }, "
                       f"got {type(value).__name__}")]
    if "dist" not in value:
        return [(f"{name}.dist", f"missing key 'dist' (one of: {_known()})")]
    kind = value["dist"]
    if not isinstance(kind, str) or kind not in DISTRIBUTIONS:
        return [(f"{name}.dist", f"unknown distribution {kind!r} (known: {_known()})")]

    required, optional = DISTRIBUTIONS[kind]
    problems: list[tuple[str, str]] = []
    for key in required:
        if key not in value:
            problems.append((f"{name}.{key}",
                             f"missing key '{key}' ({kind} needs {', '.join(required)})"))
    for key in value:
        if key != "dist" and key not in required and key not in optional:
            allowed = ", ".join(required + optional)
            problems.append((f"{name}.{key}",
                             f"unknown key '{key}' for {kind} (allowed: {allowed})"))
    for key in required + optional:
        if key in value:
            v = value[key]
            if not _is_number(v):
                problems.append((f"{name}.{key}", f"must be a number, got {v!r}"))
            elif not math.isfinite(float(v)):
                problems.append((f"{name}.{key}", f"must be a finite number, got {v}"))
    if problems:
        return problems

    p = {k: float(v) for k, v in value.items() if k != "dist"}
    problems = _check_values(name, kind, p)
    if problems or "nominal" not in p:
        return problems
    lo, hi = _support(kind, p)
    if not lo <= p["nominal"] <= hi:
        problems.append((f"{name}.nominal",
                         f"nominal {p['nominal']:g} lies outside the support "
                         f"[{lo:g}, {hi:g}] of the distribution"))
    return problems


def _check_values(name: str, kind: str, p: dict[str, float]) -> list[tuple[str, str]]:
    """Relations between the numbers of one distribution table."""
    problems = []
    if "low" in p and "high" in p and p["low"] >= p["high"]:
        problems.append((f"{name}.low",
                         f"low ({p['low']:g}) must be below high ({p['high']:g})"))
    if kind == "loguniform" and p["low"] <= 0:
        problems.append((f"{name}.low", f"loguniform needs low > 0, got {p['low']:g}"))
    if kind == "normal" and p["sd"] <= 0:
        problems.append((f"{name}.sd", f"sd must be positive, got {p['sd']:g}"))
    if kind == "lognormal":
        if p["median"] <= 0:
            problems.append((f"{name}.median",
                             f"median must be positive, got {p['median']:g}"))
        if p["gsd"] <= 1:
            problems.append((f"{name}.gsd",
                             f"gsd (geometric standard deviation) must exceed 1, "
                             f"got {p['gsd']:g}"))
    if kind == "triangular" and p["low"] < p["high"] and not (
            p["low"] <= p["mode"] <= p["high"]):
        problems.append((f"{name}.mode",
                         f"mode ({p['mode']:g}) must lie in [low, high] = "
                         f"[{p['low']:g}, {p['high']:g}]"))
    if kind == "normal" and not problems and ("low" in p or "high" in p):
        a, b = _standard_bounds(p)
        if _normal_mass(a, b) < _NEGLIGIBLE_MASS:
            key = f"{name}.low" if "low" in p else f"{name}.high"
            problems.append((key,
                             "the truncation window [low, high] holds negligible "
                             f"probability (< {_NEGLIGIBLE_MASS:g}) under "
                             f"normal({p['mean']:g}, {p['sd']:g})"))
    return problems


def _standard_bounds(p: Mapping[str, float]) -> tuple[float, float]:
    """Truncation bounds of a normal in standard units (infinite when absent)."""
    a = (p["low"] - p["mean"]) / p["sd"] if "low" in p else -np.inf
    b = (p["high"] - p["mean"]) / p["sd"] if "high" in p else np.inf
    return a, b


def _normal_mass(a: float, b: float) -> float:
    """P(a < Z < b) for a standard normal, accurate in both tails."""
    if a > 0:  # upper tail: difference of survival functions avoids 1 - 1
        return float(stats.norm.sf(a) - stats.norm.sf(b))
    return float(stats.norm.cdf(b) - stats.norm.cdf(a))


def _support(kind: str, p: Mapping[str, float]) -> tuple[float, float]:
    if kind in ("uniform", "loguniform", "triangular"):
        return p["low"], p["high"]
    if kind == "lognormal":
        return 0.0, math.inf
    return p.get("low", -math.inf), p.get("high", math.inf)


def _frozen(kind: str, p: Mapping[str, float]):
    """The scipy.stats frozen distribution for a validated table."""
    if kind == "uniform":
        return stats.uniform(loc=p["low"], scale=p["high"] - p["low"])
    if kind == "loguniform":
        return stats.loguniform(p["low"], p["high"])
    if kind == "normal":
        if "low" in p or "high" in p:
            a, b = _standard_bounds(p)
            return stats.truncnorm(a, b, loc=p["mean"], scale=p["sd"])
        return stats.norm(loc=p["mean"], scale=p["sd"])
    if kind == "lognormal":
        # ln X ~ N(ln median, ln gsd): scipy's shape s is sigma, scale is exp(mu).
        return stats.lognorm(s=math.log(p["gsd"]), scale=p["median"])
    if kind == "triangular":
        width = p["high"] - p["low"]
        return stats.triang(c=(p["mode"] - p["low"]) / width, loc=p["low"], scale=width)
    raise ValueError(f"unknown distribution {kind!r}")


@dataclass(frozen=True, eq=True)
class Distribution:
    """One uncertain parameter's distribution.

    Attributes
    ----------
    kind : str
        One of the keys of `DISTRIBUTIONS`.
    params : dict
        The numbers as written in the study file (without ``dist``; with
        ``nominal`` when the user gave one).
    """

    kind: str
    params: dict

    __hash__ = None  # params is a dict

    @cached_property
    def _scipy(self):
        return _frozen(self.kind, {k: float(v) for k, v in self.params.items()})

    def ppf(self, u: np.ndarray) -> np.ndarray:
        """Inverse CDF, vectorised: values whose CDF equals ``u`` (0 < u < 1)."""
        return np.asarray(self._scipy.ppf(np.asarray(u, dtype=float)), dtype=float)

    @property
    def median(self) -> float:
        """The distribution's median."""
        return float(self._scipy.median())

    @property
    def mean(self) -> float:
        """The distribution's mean."""
        return float(self._scipy.mean())

    @property
    def support(self) -> tuple[float, float]:
        """Smallest and largest possible values (may be infinite)."""
        return _support(self.kind, {k: float(v) for k, v in self.params.items()})

    @property
    def nominal(self) -> float:
        """The value used for single-point work: ``nominal`` if given, else the median."""
        if "nominal" in self.params:
            return float(self.params["nominal"])
        return self.median

    def describe(self) -> str:
        """Short human-readable form, e.g. ``uniform(2, 10)``."""
        p = self.params
        if self.kind in ("uniform", "loguniform"):
            text = f"{self.kind}({p['low']:g}, {p['high']:g})"
        elif self.kind == "triangular":
            text = f"triangular({p['low']:g}, {p['mode']:g}, {p['high']:g})"
        elif self.kind == "lognormal":
            text = f"lognormal(median={p['median']:g}, gsd={p['gsd']:g})"
        else:
            text = f"normal({p['mean']:g}, {p['sd']:g})"
            if "low" in p or "high" in p:
                lo = f"[{p['low']:g}" if "low" in p else "(-inf"
                hi = f"{p['high']:g}]" if "high" in p else "inf)"
                text += f" truncated to {lo}, {hi}"
        return text

    def as_dict(self) -> dict:
        """JSON-ready form: ``{"dist": kind, **params, "nominal": value}``."""
        out = {"dist": self.kind}
        out.update({k: v for k, v in self.params.items() if k != "nominal"})
        out["nominal"] = self.nominal
        return out


def make_distribution(value: Mapping, name: str = "parameter") -> Distribution:
    """Build a `Distribution` from a distribution table.

    Parameters
    ----------
    value : Mapping
        A table that `check_parameter` accepted, e.g.
        ``{"dist": "normal", "mean": 1, "sd": 0.2, "low": 0}``.
    name : str, optional
        Parameter name, only used to locate an error.

    Raises
    ------
    InputError
        If the table is not valid (the caller should have checked it first).
    """
    problems = check_parameter(name, value)
    if not isinstance(value, Mapping):
        problems = problems or [(name, "a fixed number has no distribution")]
    if problems:
        key, problem = problems[0]
        raise InputError(problem, table="parameters", key=key)
    return Distribution(kind=value["dist"],
                        params={k: v for k, v in value.items() if k != "dist"})
