"""``summary.json`` of a fit: quantiles, diagnostics, priors and provenance (output contract).

:func:`build_summary` turns retained samples, the sampler run and the
initialisation into the dictionary written as ``summary.json``; its layout is
fixed by ``/work/shared/spec/output-contract.md``.
"""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np

from orbitmass._version import __version__, software_versions
from orbitmass.core.diagnostics import walker_modes
from orbitmass.model.parameters import priors_used
from orbitmass.results import COLUMN_DOC, prior_dominated, quantile_block

__all__ = ["build_summary"]


def _nanmax(x) -> float:
    """``np.nanmax`` without its warning: NaN when every value is NaN (a run stopped after a few steps)."""
    x = np.asarray(x, dtype=float)
    keep = ~np.isnan(x)
    return float(np.max(x[keep])) if keep.any() else float("nan")


def build_summary(target, space, samples, run, init, seed: int, wall: float) -> dict:
    """The content of ``summary.json``.

    Parameters
    ----------
    target : Target
    space : ParameterSpace
    samples : pandas.DataFrame
        Retained samples (:func:`orbitmass.results.derive_samples`).
    run : orbitmass.inference.sampler.SamplerRun
    init : object with ``other_modes``
        The initialisation (or what a checkpoint recorded of it).
    seed : int
    wall : float
        Wall-clock seconds of the whole fit.

    Returns
    -------
    dict
    """
    derived = {}
    for col in samples.columns:
        if "." not in col and col != "log_posterior":
            derived[col] = quantile_block(samples[col].to_numpy())
    if "extended_mass_fraction" in samples.columns:  # a one-sided 95 % upper limit, a plain number
        frac = samples["extended_mass_fraction"].to_numpy()
        frac = frac[np.isfinite(frac)]
        derived["extended_mass_fraction_upper95"] = float(np.quantile(frac, 0.95)) if frac.size else float("nan")
    companions = {}
    for comp in target.companions:
        prefix = comp.name + "."
        companions[comp.name] = {col[len(prefix):]: quantile_block(samples[col].to_numpy())
                                 for col in samples.columns if col.startswith(prefix)}
    for name, flags in prior_dominated(space).items():  # velocity-only companions: what the data cannot say
        companions[name].update(flags)
    instruments = {}
    for name in space.instrument_names:
        instruments[name] = {"offset_kms": quantile_block(samples[f"offset_kms.{name}"].to_numpy()),
                             "jitter_kms": quantile_block(samples[f"jitter_kms.{name}"].to_numpy())}
    kept = run.chain[run.burn:]
    modes = {}
    for lay in space.companions:
        idx = lay.idx.get("ln_period", -1)
        if idx >= 0 and kept.shape[0] > 4:
            modes[lay.name] = walker_modes(kept[:, :, idx])
    per_param = {name: {"tau": float(run.tau[i]), "ess": float(run.ess[i]), "rhat": float(run.rhat[i])}
                 for i, name in enumerate(space.names)}
    mass_idx = space.index.get("ln_mass")
    ambiguous = [c.name for c in target.companions if not space.planes[space.companions[
        [lay.name for lay in space.companions].index(c.name)].plane]["los"]]
    diagnostics = {
        "converged": bool(run.converged),
        "n_samples": int(len(samples)),
        "ess_min": float(np.min(run.ess)) if len(run.ess) else float("nan"),
        "ess_mass": float(run.ess[mass_idx]) if mass_idx is not None else None,
        "tau_max": _nanmax(run.tau),
        "rhat_max": _nanmax(run.rhat),
        "acceptance_fraction": float(run.acceptance_fraction),
        "wall_seconds": float(wall),
        "sampling_seconds": float(run.sampling_seconds),
        "n_steps": int(run.n_steps),
        "n_walkers": int(run.chain.shape[1]),
        "burn": int(run.burn),
        "thin": int(run.thin),
        "n_evaluations": int(run.n_evaluations),
        "interrupted": bool(run.interrupted),
        "multimodal": bool(any(m > 1 for m in modes.values())),
        "period_modes": modes,
        "other_modes": init.other_modes,
        "per_parameter": per_param,
        "omega_node_ambiguous": ambiguous,
    }
    return {
        "orbitmass_version": __version__,
        "target": target.name,
        "reference_epoch": float(target.reference_epoch),
        "frame": target.frame,
        "derived": derived,
        "companions": companions,
        "instruments": instruments,
        "diagnostics": diagnostics,
        "priors": priors_used(space),
        "units": {k: v[1] for k, v in COLUMN_DOC.items()},
        "provenance": {
            "seed": int(seed),
            "data_sha256": target.data_sha256,
            "versions": software_versions(),
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "target_file": str(target.source),
        },
    }
