"""One chunk's work: steady states, classes and claim outcomes for a batch of sets.

Plain arrays in, two pandas tables out (the rows of equilibria.parquet and
outcomes.parquet for these sets). Used by `poise inspect` for a single set too, so
one code path serves both.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from poise.equilibria.continuum import on_continuum
from poise.equilibria.limits import beyond_limits
from poise.equilibria.finder import FoundStates, find_steady_states
from poise.model import CompiledModel
from poise.stability.classify import CLASS_NAMES, Classification, classify
from poise.study.spec import Study

NODE = np.isin(np.arange(len(CLASS_NAMES)), [CLASS_NAMES.index("stable node"), CLASS_NAMES.index("unstable node")])
FOCUS = np.isin(np.arange(len(CLASS_NAMES)), [CLASS_NAMES.index("stable focus"), CLASS_NAMES.index("unstable focus")])
SADDLE = np.isin(np.arange(len(CLASS_NAMES)), [CLASS_NAMES.index("saddle"), CLASS_NAMES.index("saddle-focus")])


@dataclass
class ChunkResult:
    """Rows for outcomes.parquet (`sets`) and equilibria.parquet (`equilibria`)."""

    sets: pd.DataFrame
    equilibria: pd.DataFrame
    jacobians: np.ndarray       # (R, n, n) reduced Jacobians of the equilibria rows
    trajectories: pd.DataFrame | None = None   # with [long_run]: rows of trajectories.parquet


def analyse_sets(study: Study, model: CompiledModel, sample_ids: np.ndarray,
                 params: np.ndarray, solver_method: str = "newton") -> ChunkResult:
    """Find, classify and judge every steady state of each parameter set.

    Parameters
    ----------
    study : the study (claims, parameter names).
    model : compiled with `params`' columns as its varying parameters.
    sample_ids : (B,) identifiers of the sets.
    params : (B, m) values of `model.varying`.
    """
    settings = study.solver
    newton_settings = dict(starts=settings.starts, deflation_rounds=settings.deflation_rounds,
                           max_iterations=settings.max_iterations)
    if solver_method == "homotopy":
        from poise.equilibria.choice import polynomial_system
        from poise.equilibria.continuation import find_by_homotopy, hub_parameters
        found = find_by_homotopy(model.kernels, polynomial_system(model), params,
                                 model.domain_low, model.domain_high,
                                 hubs=hub_parameters(study.uncertain, model.varying), **newton_settings)
    else:
        from poise.equilibria.continuation import hub_parameters
        from poise.equilibria.hub_starts import HUBS, hubs_for
        hubs = hubs_for(model.kernels, hub_parameters(study.uncertain, model.varying, count=HUBS),
                        model.domain_low, model.domain_high, **newton_settings)
        found = find_steady_states(model.kernels, params, model.domain_low, model.domain_high, hubs=hubs,
                                   **newton_settings)
    jacobians = model.kernels.jacobian(found.free, params[found.owner])
    sizes = _jacobian_terms(model, found, params)
    classes = classify(jacobians, sizes)
    continuum = on_continuum(model.kernels, found.free, params[found.owner], jacobians,
                             classes.zero_eigenvalue)
    if continuum.any():
        # A continuum yields as many "steady states" as starts that reached it: keep one
        # representative per set and label (which states are zero, positive, negative).
        keys = pd.DataFrame({"owner": found.owner, "label": labels(study.states, found.full)})
        keep = ~(continuum & keys.duplicated())
        found = FoundStates(owner=found.owner[keep], free=found.free[keep], full=found.full[keep],
                            ok=found.ok, reason=found.reason)
        jacobians, continuum = jacobians[keep], continuum[keep]
        sizes = None if sizes is None else sizes[keep]
        classes = classify(jacobians, sizes)
    ok, reason = _mark_bad_jacobians(found, jacobians)
    limits = beyond_limits(model.kernels, found.free, found.full, params[found.owner], jacobians,
                           classes.eigenvalues, classes.class_code < CLASS_NAMES.index("center"),
                           model.nonlinear)
    limits = np.where(limits != "", limits, _on_surface(model, found, params))
    for row in np.flatnonzero(limits != ""):
        if ok[found.owner[row]]:
            ok[found.owner[row]] = False
            reason[found.owner[row]] = limits[row]

    equilibria = _equilibria_table(study, found, classes, sample_ids)
    equilibria.insert(equilibria.columns.get_loc("complex_eigenvalues") + 1, "continuum", continuum)
    simulated = None
    if study.long_run is not None:   # where trajectories go: one batched simulation of the chosen sets
        from poise.longrun.pipeline import long_run_columns
        simulated = long_run_columns(study, model, found.owner, found.free, jacobians, equilibria["label"].to_numpy(),
                                     sample_ids, params, ok)
        for name, values in simulated.steady.items():
            equilibria[name] = values
    sets = _outcomes_table(study, model, found, classes, sample_ids, params, ok, reason, simulated)
    keep = ok[found.owner]
    return ChunkResult(sets=sets, equilibria=equilibria[keep].reset_index(drop=True),
                       jacobians=jacobians[keep],
                       trajectories=None if simulated is None else simulated.trajectories)


def _on_surface(model: CompiledModel, found: FoundStates, params: np.ndarray) -> np.ndarray:
    """A reason for each steady state on a switching surface of a piecewise rate (its
    two sides have different Jacobians, so one Jacobian cannot classify it), else ""."""
    reasons = np.full(found.owner.shape[0], "", dtype=object)
    if not model.surfaces.any or not reasons.size:
        return reasons
    from poise.model.switching import on_switching_surface
    on = on_switching_surface(model.surfaces, found.free, params[found.owner])
    reasons[on] = ("a steady state lies on a switching surface of a piecewise rate, where the "
                   "Jacobian differs on its two sides: its class cannot be read from one Jacobian")
    return reasons


def _jacobian_terms(model: CompiledModel, found: FoundStates, params: np.ndarray) -> np.ndarray | None:
    """Size of the terms of each Jacobian entry at each steady state (the classifier's
    unit of uncertainty), or None when the kernels do not provide it."""
    if model.kernels.jacobian_terms is None:
        return None
    return model.kernels.jacobian_terms(found.free, params[found.owner])


def _mark_bad_jacobians(found: FoundStates, jacobians: np.ndarray):
    ok, reason = found.ok.copy(), found.reason.copy()
    bad = ~np.isfinite(jacobians).all(axis=(1, 2))
    if bad.any():
        sets = np.unique(found.owner[bad])
        ok[sets] = False
        reason[sets] = "the Jacobian is not finite at a steady state"
    return ok, reason


def labels(states: tuple[str, ...], full: np.ndarray) -> np.ndarray:
    """Which states are zero at each steady state, e.g. "A>0, G=0"."""
    if full.shape[0] == 0:
        return np.array([], dtype=object)
    signs = np.where(full > 0, ">0", np.where(full < 0, "<0", "=0"))
    parts = np.char.add(np.array(states, dtype=object).astype(str), signs)
    return np.array([", ".join(row) for row in parts], dtype=object)


def _equilibria_table(study: Study, found: FoundStates, classes: Classification,
                      sample_ids: np.ndarray) -> pd.DataFrame:
    owner = found.owner
    starts = np.searchsorted(owner, owner, side="left")
    columns: dict[str, object] = {
        "sample_id": sample_ids[owner].astype(np.int64),
        "index": (np.arange(owner.size) - starts).astype(np.int64),
    }
    for j, state in enumerate(study.states):
        columns[state] = found.full[:, j]
    columns["label"] = labels(study.states, found.full)
    columns["class"] = np.asarray(CLASS_NAMES, dtype=object)[classes.class_code]
    columns["stability"] = np.asarray(classes.stability_names, dtype=object)
    columns["margin"] = classes.margin
    columns["complex_eigenvalues"] = classes.oscillatory
    for i in range(classes.eigenvalues.shape[1]):
        columns[f"eig_re_{i}"] = classes.eigenvalues[:, i].real
        columns[f"eig_im_{i}"] = classes.eigenvalues[:, i].imag
    columns["trace"] = classes.trace
    columns["determinant"] = classes.determinant
    columns["discriminant"] = classes.discriminant
    return pd.DataFrame(columns)


def _outcomes_table(study, model, found, classes, sample_ids, params, ok, reason, simulated=None) -> pd.DataFrame:
    batch = sample_ids.size
    owner = found.owner
    stable = classes.stability_code == 0
    n_steady = np.bincount(owner, minlength=batch)
    n_stable = np.bincount(owner, weights=stable, minlength=batch).astype(np.int64)
    frame = pd.DataFrame({
        "sample_id": sample_ids.astype(np.int64),
        "status": np.where(ok, "ok", "failed"),
        "reason": reason.astype(str),
        "n_steady": pd.array(np.where(ok, n_steady, 0), dtype="Int64"),
        "n_stable": pd.array(np.where(ok, n_stable, 0), dtype="Int64"),
    })
    frame.loc[~ok, ["n_steady", "n_stable"]] = pd.NA
    if simulated is not None:
        for name, values in simulated.sets.items():
            frame[name] = values
    if study.claims:
        steady = {state: found.full[:, j] for j, state in enumerate(study.states)}
        code = classes.class_code
        steady.update(stable=stable, unstable=classes.stability_code == 1,
                      undetermined=classes.stability_code == 2, node=NODE[code],
                      focus=FOCUS[code], saddle=SADDLE[code], complex_eigenvalues=classes.oscillatory,
                      margin=classes.margin)
        sets = {name: np.full(batch, value) for name, value in model.fixed_values.items()}
        sets.update({name: params[:, j] for j, name in enumerate(model.varying)})
        if simulated is not None:
            steady.update(simulated.claim_steady)
            sets.update(simulated.claim_sets)
        for claim in study.claims:
            values, undefined = claim.evaluate_sets(steady, owner, sets, batch)
            frame[claim.name] = pd.array(np.where(ok, values, False), dtype="boolean")
            if claim.long_run_words:   # no answer where the set was not simulated
                frame.loc[~simulated.simulated, claim.name] = pd.NA
                undefined &= simulated.simulated
            undefined &= (frame["status"] == "ok").to_numpy()   # a claim error fails its set
            frame.loc[undefined, "reason"] = (f"claim '{claim.name}' is undefined here (a division "
                                              "by zero or a number out of range)")
            frame.loc[undefined, "status"] = "failed"
        failed = (frame["status"] != "ok").to_numpy()
        long_run = list(simulated.sets) if simulated is not None else []
        frame.loc[failed, ["n_steady", "n_stable", *(claim.name for claim in study.claims), *long_run]] = pd.NA
    return frame


__all__ = ["ChunkResult", "analyse_sets", "labels"]
