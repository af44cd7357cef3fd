"""The Fit object: options in, ``fit(target)`` -> self; sampling, plots and reports delegated.

``Fit.fit`` validates the target and the options and hands the work to
:func:`orbitmass.inference.pipeline.run_fit` (both sampling paths, resume,
checkpoints); ``summary.json`` is built by
:func:`orbitmass.inference.summary.build_summary`.

Examples
--------
>>> from orbitmass import Fit                                  # doctest: +SKIP
>>> fit = Fit(seed=1).fit("examples/tessaly/target.toml")     # doctest: +SKIP
>>> fit.summary_table().loc["mass_msun"]                      # doctest: +SKIP
>>> fit.save("run-1")                                          # doctest: +SKIP
"""

from __future__ import annotations

from orbitmass._compat import moved_name

import logging
import time
from pathlib import Path

import pandas as pd

from orbitmass.exceptions import InputError, NotFittedError
from orbitmass.forecast.predict import predict as forecast_predict
from orbitmass.inference import pipeline
from orbitmass.inference.quality import issue_warnings
from orbitmass.inference.sampler import SamplerOptions
from orbitmass.io.export import to_inference_data
from orbitmass.io.rundir import load_run, save_run, write_products
from orbitmass.io.target import read_target
from orbitmass.model.data import Target
from orbitmass.results import COLUMN_DOC, Results, quantile_block

__all__ = ["Fit", "load"]

log = logging.getLogger(__name__)


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

        The work is done by :func:`orbitmass.inference.pipeline.run_fit`.

        Parameters
        ----------
        target : path or Target
        stop_flag : callable, optional
            Returns True when the fit should stop (e.g. after SIGINT); the
            initial search, the polish, the fast path and the sampler check
            it, and the result is then marked ``interrupted``.

        Returns
        -------
        Fit
            ``self``, with ``results_`` set.

        Raises
        ------
        InputError
            On malformed input (nothing is sampled).
        """
        t0 = time.perf_counter()
        if not isinstance(target, Target):
            target = read_target(target)
        space = pipeline.build_space(target)
        n_walkers = self.n_walkers or max(64, 4 * space.ndim)
        n_walkers += n_walkers % 2
        if n_walkers < 2 * space.ndim:
            raise InputError(f"n_walkers = {n_walkers} is too small for {space.ndim} parameters; "
                             f"use at least {2 * space.ndim}", key="walkers")
        options = SamplerOptions(max_steps=self.max_steps, min_steps=min(self.min_steps, self.max_steps),
                                 progress=self.progress)
        self.results_ = pipeline.run_fit(
            target, space, seed=pipeline.resolve_seed(self.seed), n_walkers=n_walkers, options=options,
            max_periods=self.max_periods, checkpoint=self.checkpoint, resume=self.resume, linear=self.linear,
            fast_walkers=self.n_walkers, stop_flag=stop_flag, t_start=t0)
        issue_warnings(self.results_.summary)
        return self

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
        from orbitmass.outputs.plots import corner_figure  # matplotlib only when a figure is asked for

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
        return forecast_predict(self.results, epochs, **kwargs)

    def to_arviz(self):
        """The posterior as an ArviZ ``InferenceData``, walkers as chains (needs arviz: ``orbitmass[export]``).

        See :func:`orbitmass.io.export.to_inference_data` for the groups and attributes.
        """

        return to_inference_data(self.results)

    def report(self, out_dir: str | Path) -> Path:
        """Write figures, tables, report.md and report.html into ``out_dir``; returns the report path."""
        return write_products(self.results, Path(out_dir))

    def save(self, out_dir: str | Path, *, overwrite: bool = False) -> Path:
        """Write the whole run folder (output contract) to ``out_dir``.

        Raises
        ------
        RunFolderError
            When ``out_dir`` exists, is not empty and ``overwrite`` is False.
        """
        return save_run(self.results, Path(out_dir), overwrite=overwrite)


def load(run_dir: str | Path) -> Fit:
    """A :class:`Fit` from a saved run folder, without refitting."""
    fit = Fit(seed=None)
    fit.results_ = load_run(Path(run_dir))
    fit.seed = fit.results_.summary.get("provenance", {}).get("seed")
    return fit


def __getattr__(name: str):
    """Names that moved out of this module (deprecated, see :mod:`orbitmass._compat`)."""
    return moved_name(__name__, name)
