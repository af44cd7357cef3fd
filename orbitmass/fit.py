"""The Fit object: options in, ``fit(target)`` -> self; plots and reports delegated.

Examples
--------
>>> from orbitmass import Fit                                  # doctest: +SKIP
>>> fit = Fit(seed=1).fit("examples/nucleus/target.toml")     # doctest: +SKIP
>>> fit.summary_table().loc["mass_msun"]                      # doctest: +SKIP
>>> fit.save("run-1")                                          # doctest: +SKIP
"""

from __future__ import annotations

import logging
import math
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from orbitmass._version import software_versions
from orbitmass.core.cosmology import redshift_distance_pc
from orbitmass.exceptions import InputError, NotFittedError
from orbitmass.model.data import Target
from orbitmass.model.parameters import priors_used
from orbitmass.results import COLUMN_DOC, Results, derive_samples, quantile_block

__all__ = ["Fit", "load"]

log = logging.getLogger(__name__)


class _ResumedInit:
    """What the initialisation found, as recorded in a checkpoint."""

    def __init__(self, meta: dict):
        self.best_log_post = float(meta.get("init_best_log_posterior", float("nan")))
        self.other_modes = list(meta.get("other_modes", []))
        self.n_grid = int(meta.get("n_grid", 0))


class Fit:
    """Fit Keplerian orbits to a target and hold the posterior.

    Parameters
    ----------
    seed : int or None
        Seed of every random choice of the fit (initialisation and sampler);
        the same seed and data give the same result.
    n_walkers : int or None
        Ensemble size; default ``max(64, 4 * n_dim)``.
    max_steps : int
        Step cap of the sampler.
    min_steps : int
        Steps before the first convergence check.
    progress : bool or None
        Progress bar (default: only on a terminal).
    max_periods : int
        Period grid points per companion in the initial linear search.
    linear : bool
        Use the astrometry-only fast path of :mod:`orbitmass.inference.linear` when it
        applies (one companion, east/north positions only, default orientation
        priors; see :func:`orbitmass.inference.linear.applies`): the Thiele-Innes
        constants are integrated out, three variables are sampled, and the
        draws are importance-weighted to the same posterior. It takes seconds
        and writes no checkpoint; not used when resuming.
    checkpoint : path or None
        HDF5 file the chain is checkpointed to while sampling (every minute,
        at every convergence check and when stopped).
    resume : bool
        Continue the chain in ``checkpoint`` instead of starting anew; the
        data and priors must be those of the checkpointed run. The result
        equals that of an uninterrupted run with the same seed and length.

    Attributes
    ----------
    results_ : Results
        Set by :meth:`fit` or :func:`load`.
    """

    def __init__(self, *, seed: int | None = None, n_walkers: int | None = None, max_steps: int = 20000,
                 min_steps: int = 600, progress: bool | None = None, max_periods: int = 3000,
                 checkpoint: str | Path | None = None, resume: bool = False, linear: bool = True):
        self.seed = seed
        self.n_walkers = n_walkers
        self.max_steps = max_steps
        self.min_steps = min_steps
        self.progress = progress
        self.max_periods = max_periods
        self.checkpoint = checkpoint
        self.resume = resume
        self.linear = linear

    # ------------------------------------------------------------------ fitting
    def fit(self, target: str | Path | Target, *, stop_flag=None) -> Fit:
        """Read ``target`` (a target file or a :class:`Target`) and sample its posterior.

        Returns
        -------
        Fit
            ``self``, with ``results_`` set.

        Raises
        ------
        InputError
            On malformed input (nothing is sampled).
        """
        from orbitmass.inference.initialise import initialise_walkers
        from orbitmass.inference.sampler import SamplerOptions, run_sampler
        from orbitmass.model.likelihood import LogPosterior
        from orbitmass.model.parameters import ParameterSpace

        t0 = time.perf_counter()
        if not isinstance(target, Target):
            from orbitmass.io.target import read_target

            target = read_target(target)
        z = target.distance.redshift
        d_fixed = redshift_distance_pc(z, target.distance.cosmology) if z is not None else None
        space = ParameterSpace(target, redshift_distance_pc=d_fixed)
        post = LogPosterior(space)
        seed = self.seed if self.seed is not None else int(np.random.SeedSequence().entropy % (2**31))
        rng = np.random.default_rng(seed)
        n_walkers = self.n_walkers or max(64, 4 * space.ndim)
        n_walkers += n_walkers % 2
        if n_walkers < 2 * space.ndim:
            raise InputError(f"n_walkers = {n_walkers} is too small for {space.ndim} parameters; "
                             f"use at least {2 * space.ndim}", key="walkers")
        options = SamplerOptions(max_steps=self.max_steps, min_steps=min(self.min_steps, self.max_steps),
                                 progress=self.progress)
        if self.linear and not self.resume:  # fast enough that it needs no checkpoint
            lin = self._fit_linear(space, rng, options, stop_flag)
            if lin is not None:
                theta, lp = lin["theta"], lin["log_post"]
                run, init = lin["run"], lin["init"]
                samples = derive_samples(space, theta, lp)
                summary = self._summary(target, space, samples, run, init, seed, time.perf_counter() - t0)
                diag = summary["diagnostics"]
                diag["linear_path"] = lin["diagnostics"]
                if not math.isfinite(diag["acceptance_fraction"]):
                    diag["acceptance_fraction"] = None  # importance sampling: no chain, no acceptance
                if "n_steps_3d" in lin["diagnostics"]:
                    # MCMC on the three variables: its step counts (the stored chain is thinned
                    # to the retained stride); after importance sampling there are no steps
                    diag["n_steps"] = lin["diagnostics"]["n_steps_3d"]
                    diag["burn"] = lin["diagnostics"]["burn_3d"]
                    diag["thin"] = lin["diagnostics"]["thin_3d"]
                info = {"init_best_log_posterior": init.best_log_post, "n_grid": init.n_grid,
                        "n_evaluations": run.n_evaluations, "sampler": "linear"}
                self.results_ = Results(target=target, space=space, samples=samples, theta=theta,
                                        chain=run.chain, log_prob=run.log_prob, burn=run.burn, thin=run.thin,
                                        summary=summary, info=info)
                return self
        ckpt_path = Path(self.checkpoint) if self.checkpoint is not None else None
        backend = None
        if self.resume:
            from orbitmass.io.checkpoint import backend_from_checkpoint, load_checkpoint

            if ckpt_path is None:
                raise InputError("resume=True needs a checkpoint path", key="checkpoint")
            ckpt = load_checkpoint(ckpt_path)
            meta = ckpt["meta"]
            if meta.get("data_sha256") != target.data_sha256 or meta.get("names") != space.names:
                raise InputError(f"{ckpt_path}: the checkpoint belongs to other data or priors "
                                 "(checksum or parameters differ); start a new fit instead of --resume",
                                 file=str(ckpt_path))
            for var in space.variables:
                if var.name in meta["windows"]:
                    var.centre, var.width = meta["windows"][var.name]
            seed = int(meta["seed"])
            backend = backend_from_checkpoint(ckpt)
            p0 = None
            init = _ResumedInit(meta)
        else:
            init = initialise_walkers(post, n_walkers, rng, max_periods=self.max_periods)
            p0 = init.walkers
            meta = {"seed": int(seed), "data_sha256": target.data_sha256, "names": space.names,
                    "windows": {v.name: [v.centre, v.width] for v in space.variables if v.kind == "angle"},
                    "init_best_log_posterior": init.best_log_post, "other_modes": init.other_modes,
                    "n_grid": init.n_grid, "elapsed_seconds": 0.0}
        elapsed_before = float(meta.get("elapsed_seconds", 0.0))
        checkpoint_fn = None
        if ckpt_path is not None:
            from orbitmass.io.checkpoint import save_checkpoint

            def checkpoint_fn(b):
                meta["elapsed_seconds"] = elapsed_before + time.perf_counter() - t0
                save_checkpoint(ckpt_path, b, meta)

        run = run_sampler(post, p0, seed=int(rng.integers(2**31 - 1)), options=options,
                          backend=backend, stop_flag=stop_flag, checkpoint=checkpoint_fn)
        theta, lp = run.retained()
        samples = derive_samples(space, theta, lp)
        wall = time.perf_counter() - t0 + elapsed_before
        summary = self._summary(target, space, samples, run, init, seed, wall)
        info = {"init_best_log_posterior": init.best_log_post, "n_grid": init.n_grid,
                "n_evaluations": run.n_evaluations}
        self.results_ = Results(target=target, space=space, samples=samples, theta=theta, chain=run.chain,
                                log_prob=run.log_prob, burn=run.burn, thin=run.thin, summary=summary, info=info)
        return self

    def _fit_linear(self, space, rng, options, stop_flag):
        """The astrometry-only fast path, or None when it does not apply or its weights are poor."""
        from orbitmass.inference.linear import LinearPathError, applies, fit_linear

        if not applies(space):
            return None
        try:
            theta, lp, lin = fit_linear(space, rng, options, n_walkers=self.n_walkers,
                                        max_periods=self.max_periods, stop_flag=stop_flag)
        except LinearPathError as exc:
            log.warning("astrometry-only fast path failed (%s); sampling every element instead", exc)
            return None
        diag = lin["diagnostics"]
        if diag["fallback_recommended"] and not lin["run"].interrupted:
            log.warning("astrometry-only fast path: importance weights too uneven (Kish ESS %.0f of %d); "
                        "sampling every element instead", diag["kish_ess"], diag["n_weighted"])
            return None
        return {"theta": theta, "log_post": lp, **lin}

    @staticmethod
    def _summary(target, space, samples, run, init, seed, wall) -> dict:
        from orbitmass import __version__
        from orbitmass.core.diagnostics import walker_modes

        derived = {}
        for col in samples.columns:
            if "." not in col and col != "log_posterior":
                derived[col] = quantile_block(samples[col].to_numpy())
        companions = {}
        for comp in target.companions:
            prefix = comp.name + "."
            companions[comp.name] = {col[len(prefix):]: quantile_block(samples[col].to_numpy())
                                     for col in samples.columns if col.startswith(prefix)}
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
            "tau_max": float(np.nanmax(run.tau)) if len(run.tau) else float("nan"),
            "rhat_max": float(np.nanmax(run.rhat)) if len(run.rhat) else float("nan"),
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

    # ------------------------------------------------------------------ access
    @property
    def results(self) -> Results:
        """The :class:`Results`; raises :class:`NotFittedError` before :meth:`fit`."""
        res = getattr(self, "results_", None)
        if res is None:
            raise NotFittedError("this Fit has no results yet: call fit(target) or orbitmass.load(run_dir)")
        return res

    @property
    def summary(self) -> dict:
        """The content of ``summary.json``."""
        return self.results.summary

    def summary_table(self) -> pd.DataFrame:
        """Posterior summary, one row per quantity: median, quantiles and unit."""
        rows = []
        for col in self.results.samples.columns:
            key = col
            if "." in col:
                head, tail = col.split(".", 1)
                key = f"<C>.{tail}" if head in self.results.companion_names else f"{head}.<I>"
            unit = COLUMN_DOC.get(key, ("", "", ""))[1]
            block = quantile_block(self.results.samples[col].to_numpy())
            rows.append({"quantity": col, "unit": unit, **block})
        return pd.DataFrame(rows).set_index("quantity")

    def corner(self, **kwargs):
        """Corner plot of the key parameters (see :func:`orbitmass.outputs.plots.corner_figure`)."""
        from orbitmass.outputs.plots import corner_figure

        return corner_figure(self.results, **kwargs)

    def plot_orbit(self, **kwargs):
        """Sky-plane orbits, velocities and residuals (see :func:`orbitmass.outputs.plots.orbit_figure`)."""
        from orbitmass.outputs.plots import orbit_figure

        return orbit_figure(self.results, **kwargs)

    def plot_trace(self, **kwargs):
        """Walker traces (see :func:`orbitmass.outputs.plots.trace_figure`)."""
        from orbitmass.outputs.plots import trace_figure

        return trace_figure(self.results, **kwargs)

    def predict(self, epochs, **kwargs) -> pd.DataFrame:
        """Posterior-predictive positions and velocities at ``epochs`` (Julian years), median and 68/95 % bands.

        The ``predictions.csv`` table; see :func:`orbitmass.forecast.predict.predict`
        for the columns and ``kwargs``.
        """
        from orbitmass.forecast.predict import predict

        return predict(self.results, epochs, **kwargs)

    def to_arviz(self):
        """The posterior as an ArviZ ``InferenceData``, walkers as chains (needs arviz: ``orbitmass[export]``).

        See :func:`orbitmass.io.export.to_inference_data` for the groups and attributes.
        """
        from orbitmass.io.export import to_inference_data

        return to_inference_data(self.results)

    def report(self, out_dir: str | Path) -> Path:
        """Write figures, tables, report.md and report.html into ``out_dir``; returns the report path."""
        from orbitmass.io.rundir import write_products

        return write_products(self.results, Path(out_dir))

    def save(self, out_dir: str | Path, *, overwrite: bool = False) -> Path:
        """Write the whole run folder (output contract) to ``out_dir``.

        Raises
        ------
        RunFolderError
            When ``out_dir`` exists, is not empty and ``overwrite`` is False.
        """
        from orbitmass.io.rundir import save_run

        return save_run(self.results, Path(out_dir), overwrite=overwrite)


def load(run_dir: str | Path) -> Fit:
    """A :class:`Fit` from a saved run folder, without refitting."""
    from orbitmass.io.rundir import load_run

    fit = Fit(seed=None)
    fit.results_ = load_run(Path(run_dir))
    fit.seed = fit.results_.summary.get("provenance", {}).get("seed")
    return fit
