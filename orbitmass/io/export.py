"""Exports of a posterior: an ArviZ ``InferenceData``, a NetCDF file or a plain CSV table.

:func:`to_inference_data` turns :class:`~orbitmass.results.Results` into an
ArviZ ``InferenceData``; :func:`export_run` writes a run folder's (or a
result's) posterior to a file in one of :data:`EXPORT_FORMATS`.

Layout of the ``InferenceData``
    ``posterior``
        One variable per sample column (``mass_msun``, ``C1.period_yr``,
        ``offset_kms.spec-a``, ...; the unit is in the name, as in the
        samples), every sampled and derived quantity; dimensions
        ``(chain, draw)``. Each variable has the attributes ``units`` (the
        unit key of the column), ``long_name`` and ``description``.
    ``sample_stats``
        ``lp``: the log posterior of each sample (ArviZ's name for it; the
        ``log_posterior`` column of the samples).
    attributes (of the object and of both groups)
        ``orbitmass_version`` (of the fit), ``exported_by``, ``target``,
        ``seed``, ``layout`` (what the chain and draw dimensions mean),
        ``method``, ``burn`` and ``thin`` (of the stored chain, in steps),
        ``n_samples``, ``converged`` (1 or 0), and ``n_walkers`` when the
        walkers are the chains.

    After ordinary sampling the walkers are the chains: draw ``j`` of chain
    ``k`` is walker ``k`` at the ``j``-th retained step (after ``burn``
    steps, every ``thin``-th), exactly the retained samples of the run. After
    the astrometry-only fast path the retained samples are importance
    weighted and resampled, so they are not a Markov chain: they are given
    as one chain of resampled draws, ``layout`` says so, and chain-based
    diagnostics (R-hat, ESS) of the object do not apply to them.

CSV
    One row per retained sample in the order of ``posterior.h5``, one column
    per sample column (the header row; the unit is in each name), values
    written with the shortest text that reads back to the same float64;
    missing values (a quantity undefined for a sample) are empty fields.

ArviZ (and through it xarray and h5netcdf) is an optional dependency:
``pip install "orbitmass[export]"``. It is imported only when needed.
"""

from __future__ import annotations

import contextlib
import logging
import os
import secrets
from pathlib import Path
from typing import Any

import numpy as np

from orbitmass._atomic import LOCK_NAME, MARKER_NAME, atomic_path, check_writable, read_marker
from orbitmass._version import __version__
from orbitmass.exceptions import InputError, OrbitmassError, RunFolderError
from orbitmass.io.rundir import RUN_FILES, load_run
from orbitmass.model.quantities import quantity

__all__ = ["EXPORT_FORMATS", "to_inference_data", "export_run", "format_from_path", "LP_COLUMN"]

log = logging.getLogger(__name__)

#: format name -> usual file suffixes (the first is the one suggested)
EXPORT_FORMATS: dict[str, tuple[str, ...]] = {"netcdf": (".nc", ".netcdf", ".nc4"), "csv": (".csv",)}
#: sample column that holds the log posterior (``lp`` in ``sample_stats``)
LP_COLUMN = "log_posterior"
_INSTALL_HINT = 'pip install "orbitmass[export]" (or pip install arviz)'


def _arviz():
    """Import ArviZ, or raise an :class:`OrbitmassError` with the install hint."""
    try:
        import arviz  # start-up time: loaded only when needed
    except ImportError:
        raise OrbitmassError(f"exporting to ArviZ or NetCDF needs the optional package arviz, which is not "
                             f"installed; install it with: {_INSTALL_HINT}") from None
    return arviz


def _walker_layout(results) -> tuple[int, int] | None:
    """(n_retained_steps, n_walkers) when the samples are exactly the retained chain, else None."""
    chain = np.asarray(results.chain)
    theta = np.asarray(results.theta)
    if chain.ndim != 3 or chain.shape[1] == 0 or theta.ndim != 2:
        return None
    kept = chain[int(results.burn)::max(int(results.thin), 1)]
    n_steps, n_walkers, n_dim = kept.shape
    if n_steps * n_walkers != len(results.samples) or theta.shape != (n_steps * n_walkers, n_dim):
        return None
    if not np.array_equal(kept.reshape(-1, n_dim), theta):
        return None
    return n_steps, n_walkers


def _fast_path(results) -> bool:
    """True when the run took the astrometry-only fast path (importance-weighted, resampled draws)."""
    return "linear_path" in results.summary.get("diagnostics", {}) or results.info.get("sampler") == "linear"


def _method(results) -> str:
    if _fast_path(results):
        lin = results.summary.get("diagnostics", {}).get("linear_path")
        how = str(lin.get("sampler_3d", "")) if isinstance(lin, dict) else ""
        return ("astrometry-only fast path: Thiele-Innes constants integrated out, "
                f"3 variables sampled ({how or 'see summary.json'}), draws importance-weighted and resampled")
    return "affine-invariant ensemble MCMC (emcee), every sampled parameter"


def _attrs(results, layout: str, n_walkers: int | None) -> dict[str, Any]:

    summary = results.summary
    seed = summary.get("provenance", {}).get("seed")
    attrs: dict[str, Any] = {
        "orbitmass_version": str(summary.get("orbitmass_version", __version__)),  # the version that fitted
        "exported_by": f"orbitmass {__version__}",
        "target": str(summary.get("target", results.target.name)),
        "seed": int(seed) if seed is not None else -1,
        "layout": layout,
        "method": _method(results),
        "burn": int(results.burn),
        "thin": int(results.thin),
        "n_samples": int(len(results.samples)),
        "converged": int(bool(summary.get("diagnostics", {}).get("converged", False))),
        "units": "in each variable's name and its 'units' attribute (e.g. mass_msun: solar masses)",
    }
    if n_walkers is not None:
        attrs["n_walkers"] = int(n_walkers)
    if seed is None:
        attrs["seed_note"] = "the run recorded no seed (-1)"
    return attrs


def _column_attrs(column: str, companions) -> dict[str, str]:
    q = quantity(column, companions)
    if q is None:
        return {}
    return {"units": q.unit, "long_name": q.name, "description": q.meaning}


def to_inference_data(results):
    """An ArviZ ``InferenceData`` of the posterior in ``results``.

    Parameters
    ----------
    results : Results
        A fitted or loaded posterior (:class:`orbitmass.results.Results`).

    Returns
    -------
    arviz.InferenceData
        Groups ``posterior`` (every sample column but the log posterior;
        dimensions ``(chain, draw)``) and ``sample_stats`` (``lp``); the
        attributes listed in the module docstring. Walkers are the chains
        when the retained samples are the retained chain; after the
        astrometry-only fast path, one chain of resampled draws.

    Raises
    ------
    OrbitmassError
        When ArviZ is not installed (the message says how to install it).

    Examples
    --------
    >>> from orbitmass import load                                   # doctest: +SKIP
    >>> idata = to_inference_data(load("run-1").results)             # doctest: +SKIP
    >>> idata.posterior["mass_msun"].dims                            # doctest: +SKIP
    ('chain', 'draw')
    """
    az = _arviz()
    samples = results.samples
    shape = _walker_layout(results)
    if shape is not None:
        n_steps, n_walkers = shape
        layout = (f"walkers as chains: chain k is walker k of {n_walkers}, draw j its j-th retained step "
                  f"(after {int(results.burn)} burn-in steps, thinned by {int(results.thin)})")

        def arrange(values: np.ndarray) -> np.ndarray:
            return values.reshape(n_steps, n_walkers).T
    else:
        n_walkers = None
        if _fast_path(results):
            layout = ("one chain of resampled draws: the astrometry-only fast path importance-weights its draws "
                      "and resamples them, so there is no chain of walkers; the draws are not a Markov chain "
                      "and chain-based diagnostics (R-hat, ESS) of this object do not apply")
        else:
            layout = ("one chain of the retained samples in stored order: the stored chain does not reproduce "
                      "them, so there is no chain of walkers")

        def arrange(values: np.ndarray) -> np.ndarray:
            return values[None, :]

    companions = results.companion_names
    posterior = {c: arrange(samples[c].to_numpy(dtype=float)) for c in samples.columns if c != LP_COLUMN}
    stats = {}
    if LP_COLUMN in samples.columns:
        stats["lp"] = arrange(samples[LP_COLUMN].to_numpy(dtype=float))
    attrs = _attrs(results, layout, n_walkers)
    idata = az.from_dict(posterior=posterior, sample_stats=stats or None, attrs=dict(attrs),
                         posterior_attrs=dict(attrs), sample_stats_attrs=dict(attrs))
    for name in posterior:
        idata.posterior[name].attrs.update(_column_attrs(name, companions))
    if stats:
        idata.sample_stats["lp"].attrs.update({"long_name": "log posterior",
                                               "description": f"the '{LP_COLUMN}' column of the samples"})
    return idata


def format_from_path(path: str | os.PathLike[str]) -> str:
    """Export format for the suffix of ``path`` (``.nc`` -> netcdf, ``.csv`` -> csv).

    Raises
    ------
    InputError
        When the suffix names no known format.
    """
    suffix = Path(path).suffix.lower()
    for name, suffixes in EXPORT_FORMATS.items():
        if suffix in suffixes:
            return name
    raise InputError(f"cannot tell the export format from the file name {Path(path).name!r}; give a format "
                     f"({' or '.join(EXPORT_FORMATS)}) or a file ending in "
                     f"{' or '.join(s[0] for s in EXPORT_FORMATS.values())}", key="format")


def _results_of(source):
    """Results from a Results, a fitted Fit (anything with ``.results``) or a run folder path."""
    if isinstance(source, str | os.PathLike):

        return load_run(Path(source))
    return getattr(source, "results", source)


def _check_destination(path: Path, overwrite: bool) -> None:
    if os.path.lexists(path):
        if path.is_dir():
            raise RunFolderError(f"{path}: is a folder; give the name of the file to write")
        if not overwrite:
            raise _exists_error(path)
    parent = path.parent
    if parent.is_dir() and (read_marker(parent) is not None or (parent / "summary.json").is_file()):

        marker = read_marker(parent) or {}
        if path.name in RUN_FILES or path.name in (MARKER_NAME, LOCK_NAME) or path.name in marker.get("files", []):
            raise RunFolderError(f"{path}: is a file of the orbitmass run folder {parent}; an export never "
                                 "replaces it: choose another file name")
    check_writable(parent)


def _exists_error(path: Path) -> RunFolderError:
    exc = RunFolderError(f"{path}: exists; choose another file name or pass overwrite to replace it")
    exc.remedy = "overwrite"  # a command line names its own option (as orbitmass._atomic does)
    return exc


def _publish_new(tmp: Path, dest: Path) -> None:
    """Give the finished file ``tmp`` the name ``dest`` only if no file has that name (never replacing one)."""
    try:
        os.link(tmp, dest)  # fails if dest exists, atomically
    except FileExistsError:
        raise _exists_error(dest) from None
    except OSError:  # a file system without hard links: check again, then rename
        if os.path.lexists(dest):
            raise _exists_error(dest) from None
        os.replace(tmp, dest)


def _write_csv(results, tmp: Path) -> None:
    # float_format=None: the shortest repr of each float64, which reads back to the same number
    results.samples.to_csv(tmp, index=False, na_rep="", lineterminator="\n", encoding="utf-8")


def export_run(source, path: str | os.PathLike[str], format: str | None = None, *,
               overwrite: bool = False) -> Path:
    """Write the posterior of ``source`` to ``path`` in ``format``.

    Parameters
    ----------
    source : path, Results or Fit
        A run folder written by ``orbitmass fit`` (loaded and checked like
        :func:`orbitmass.load`), or a posterior in memory.
    path : path
        File to write; missing parent folders are created. Written to a
        temporary name and renamed into place, so a failed export leaves no
        partial file.
    format : {"netcdf", "csv"}, optional
        ``"netcdf"``: the :func:`to_inference_data` object written with its
        ``to_netcdf`` (read it with ``arviz.from_netcdf``); ``"csv"``: one row
        per retained sample, one column per sample column. Default: from the
        suffix of ``path`` (:func:`format_from_path`).
    overwrite : bool
        Replace ``path`` if it exists (never a file of a run folder).

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    InputError
        Unknown ``format``.
    RunFolderError
        ``source`` is not a readable run folder; ``path`` exists (without
        ``overwrite``), is a folder, a file of a run folder, or cannot be
        written.
    OrbitmassError
        NetCDF without ArviZ installed.
    """
    path = Path(path)
    fmt = format_from_path(path) if format is None else str(format).lower()
    if fmt not in EXPORT_FORMATS:
        raise InputError(f"unknown export format {format!r}; expected one of {', '.join(EXPORT_FORMATS)}",
                         key="format")
    _check_destination(path, overwrite)
    results = _results_of(source)
    idata = to_inference_data(results) if fmt == "netcdf" else None  # ArviZ missing: fail before writing
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        # written whole under a hidden name, then put in place: replacing only with
        # overwrite, else as a new name (a file that appeared meanwhile is kept)
        hidden = path.parent / f".{path.name}.export-{secrets.token_hex(4)}"
        with atomic_path(hidden) as tmp:
            if fmt == "netcdf":
                idata.to_netcdf(str(tmp))
            else:
                _write_csv(results, tmp)
        try:
            if overwrite:
                os.replace(hidden, path)
            else:
                _publish_new(hidden, path)
        finally:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(hidden)
    except OSError as exc:
        raise RunFolderError(f"{path}: cannot write the export ({exc.strerror or exc})") from None
    log.info("exported %d samples of %s to %s (%s)", len(results.samples), results.target.name, path, fmt)
    return path
