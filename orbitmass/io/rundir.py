"""Run folders: what a fit leaves on disk, and reading it back.

Layout (output contract, extended)::

    summary.json        machine-readable results (schema in the output contract)
    posterior.h5        HDF5: every retained sample (see below), chain, target data
    report.md, report.html, table.tex, table.csv, table.md
    corner.png/.pdf, orbit.png/.pdf, trace.png/.pdf, residuals.png/.pdf
    input/              verbatim copies of the target file and its tables
    .orbitmass-run      marker: orbitmass wrote this folder (JSON: kind, version,
                        creation time, the files of the run)
    .orbitmass-lock     only while a process writes the folder (pid, host, time)

``posterior.h5`` holds ``/samples`` (float64, ``(n_samples, n_columns)``,
attribute ``columns``: JSON list of column names, units in the names),
``/theta`` (the same samples in the sampled variables, attribute ``names``),
``/chain`` ``(n_steps, n_walkers, n_dim)`` and ``/log_prob`` of the whole run,
and ``/target``: the data arrays and a JSON description of every prior, so a
run loads back exactly without the original files. Attributes ``burn``,
``thin``, ``windows`` (angle-window centres) and ``orbitmass_version``.
Every dataset carries a ``sha256`` attribute (:func:`orbitmass._atomic.array_sha256`
of its dtype, shape and values), and the file attribute ``summary_sha256``
is that of summary.json's key numbers (:data:`SUMMARY_CHECKED` blocks):
:func:`load_run` refuses a run whose arrays or summary no longer match.
Read it with h5py or :func:`orbitmass.load`.

Safety (see :mod:`orbitmass._atomic`): every file is written to a temporary
name and renamed into place; a whole run folder is assembled in a hidden
sibling staging folder and swapped in at the end, so a crash never leaves a
half-written ``summary.json``. :func:`prepare_run_folder` checks the
destination before any work (writable, not under a file, not the working
directory, the home folder or ``/``, not holding the job's inputs) and takes
the folder's lock; an existing folder is replaced only with ``overwrite``
and only when orbitmass wrote everything in it. Folders of earlier versions
(no marker) are recognised by their file names.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
from collections.abc import Iterable
from dataclasses import fields
from pathlib import Path

import h5py
import numpy as np
import pandas as pd

from orbitmass._atomic import (
    LOCK_NAME,
    MARKER_NAME,
    FolderLock,
    array_sha256,
    atomic_path,
    check_output_folder,
    check_writable,
    folder_entries,
    foreign_entries,
    json_sha256,
    read_marker,
    staged_folder,
    write_json_atomic,
    write_marker,
)
from orbitmass._atomic import jsonable as _jsonable
from orbitmass._version import __version__
from orbitmass.core.cosmology import redshift_distance_pc
from orbitmass.core.relativity import model_terms
from orbitmass.exceptions import RunFolderError
from orbitmass.io.checkpoint import CHECKPOINT_NAME
from orbitmass.model.data import (
    Astrometry,
    Companion,
    Distance,
    ExtendedMass,
    FitOptions,
    Instrument,
    Relativity,
    Target,
    Velocities,
)
from orbitmass.model.parameters import ParameterSpace
from orbitmass.model.priors import FAMILIES, Prior
from orbitmass.outputs.products import write_products as render_products
from orbitmass.results import Results

__all__ = [
    "save_run",
    "load_run",
    "write_products",
    "write_json_atomic",
    "is_complete_run",
    "prepare_run_folder",
    "check_run_folder_writable",
    "target_paths",
    "RUN_KIND",
    "RUN_FILES",
]

log = logging.getLogger(__name__)

#: Marker kind of a run folder.
RUN_KIND = "run"
#: Top-level file names a run folder may hold (products, data, checkpoint).
RUN_FILES = frozenset({
    "summary.json", "posterior.h5", CHECKPOINT_NAME, "report.md", "report.html", "table.tex", "table.csv",
    "table.md", "table.ecsv", "residuals.csv",
    *(f"{n}.{ext}" for n in ("corner", "orbit", "trace", "residuals") for ext in ("png", "pdf")),
})
#: Folders a run folder may hold.
RUN_DIRS = frozenset({"input"})
#: Files that identify a run folder written without a marker (earlier versions).
_CORE_FILES = ("summary.json", "posterior.h5", CHECKPOINT_NAME)
#: summary.json blocks whose checksum posterior.h5 records.
SUMMARY_CHECKED = ("target", "derived", "companions", "instruments", "fit_quality")


def _summary_key_numbers(summary: dict) -> dict:
    block = {k: summary[k] for k in SUMMARY_CHECKED if k in summary}
    prov = summary.get("provenance")
    if isinstance(prov, dict):
        block["provenance"] = {k: prov.get(k) for k in ("seed", "data_sha256")}
    return block


def _dataset(group: h5py.Group, name: str, data, **kwargs) -> h5py.Dataset:
    data = np.asarray(data)
    ds = group.create_dataset(name, data=data, **kwargs)
    ds.attrs["sha256"] = array_sha256(data)
    return ds


# ------------------------------------------------------------ target <-> HDF5
def _prior_to_dict(p: Prior) -> dict:
    d = {"dist": p.dist}
    d.update({f.name: getattr(p, f.name) for f in fields(p)})
    return d


def _prior_from_dict(d: dict) -> Prior:
    cls = FAMILIES[d["dist"]][0]
    return cls(**{k: v for k, v in d.items() if k != "dist"})


def _write_target(group: h5py.Group, target: Target) -> None:
    meta = {
        "name": target.name, "reference_epoch": target.reference_epoch, "frame": target.frame,
        "source": str(target.source), "data_sha256": target.data_sha256,
        "central_priors": {k: _prior_to_dict(v) for k, v in target.central_priors.items()},
        "distance": {"prior": None if target.distance.prior is None else _prior_to_dict(target.distance.prior),
                     "parallax": None if target.distance.parallax is None
                     else _prior_to_dict(target.distance.parallax),
                     "redshift": target.distance.redshift, "cosmology": target.distance.cosmology},
        "instruments": [{"name": i.name, "offset": _prior_to_dict(i.offset), "jitter": _prior_to_dict(i.jitter)}
                        for i in target.instruments.values()],
        "companions": [{"name": c.name, "plane": c.plane,
                        "priors": {k: _prior_to_dict(v) for k, v in c.priors.items()},
                        "astrometry_source": None if c.astrometry is None else c.astrometry.source,
                        "velocities_source": None if c.velocities is None else c.velocities.source}
                       for c in target.companions],
        "relativity": None if target.relativity is None else {
            "redshift_factor": _prior_to_dict(target.relativity.redshift_factor),
            "precession_factor": _prior_to_dict(target.relativity.precession_factor),
            "roemer_delay": bool(target.relativity.roemer_delay)},
        "extended_mass": None if target.extended_mass is None else {
            "fraction": _prior_to_dict(target.extended_mass.fraction),
            "scale_radius_mas": target.extended_mass.scale_radius_mas,
            "scale_radius_au": target.extended_mass.scale_radius_au},
        "fit_options": {"walkers": target.fit_options.walkers, "seed": target.fit_options.seed,
                        "max_steps": target.fit_options.max_steps},
    }
    group.attrs["meta"] = json.dumps(_jsonable(meta))
    for k, c in enumerate(target.companions):
        if c.astrometry is not None:
            g = group.create_group(f"companion{k}/astrometry")
            for name in ("t_yr", "polar", "value1", "value2", "err1", "err2", "corr", "lines"):
                _dataset(g, name, getattr(c.astrometry, name))
        if c.velocities is not None:
            g = group.create_group(f"companion{k}/velocities")
            for name in ("t_yr", "rv_kms", "rv_err_kms", "central", "lines"):
                _dataset(g, name, getattr(c.velocities, name))
            _dataset(g, "instrument", np.asarray(c.velocities.instrument, dtype="S"))


def _read_target(group: h5py.Group) -> Target:
    meta = json.loads(group.attrs["meta"])
    comps = []
    for k, cm in enumerate(meta["companions"]):
        astro = vel = None
        if f"companion{k}/astrometry" in group:
            g = group[f"companion{k}/astrometry"]
            astro = Astrometry(**{n: g[n][()] for n in ("t_yr", "polar", "value1", "value2", "err1", "err2",
                                                          "corr", "lines")}, source=cm["astrometry_source"] or "")
        if f"companion{k}/velocities" in group:
            g = group[f"companion{k}/velocities"]
            vel = Velocities(t_yr=g["t_yr"][()], rv_kms=g["rv_kms"][()], rv_err_kms=g["rv_err_kms"][()],
                             instrument=np.char.decode(g["instrument"][()], "utf-8").astype(str),
                             central=g["central"][()], lines=g["lines"][()], source=cm["velocities_source"] or "")
        comps.append(Companion(name=cm["name"], astrometry=astro, velocities=vel, plane=cm["plane"],
                               priors={k2: _prior_from_dict(v) for k2, v in cm["priors"].items()}))
    d = meta["distance"]
    rel = meta.get("relativity")  # absent in run folders of earlier versions
    ext = meta.get("extended_mass")
    relativity = None if rel is None else Relativity(
        redshift_factor=_prior_from_dict(rel["redshift_factor"]),
        precession_factor=_prior_from_dict(rel["precession_factor"]), roemer_delay=bool(rel["roemer_delay"]))
    extended = None if ext is None else ExtendedMass(
        fraction=_prior_from_dict(ext["fraction"]), scale_radius_mas=ext["scale_radius_mas"],
        scale_radius_au=ext["scale_radius_au"])
    return Target(
        name=meta["name"], reference_epoch=meta["reference_epoch"], frame=meta["frame"],
        central_priors={k: _prior_from_dict(v) for k, v in meta["central_priors"].items()},
        distance=Distance(prior=None if d["prior"] is None else _prior_from_dict(d["prior"]),
                          parallax=None if d["parallax"] is None else _prior_from_dict(d["parallax"]),
                          redshift=d["redshift"], cosmology=d["cosmology"]),
        instruments={i["name"]: Instrument(name=i["name"], offset=_prior_from_dict(i["offset"]),
                                           jitter=_prior_from_dict(i["jitter"])) for i in meta["instruments"]},
        companions=tuple(comps), source=meta["source"], data_sha256=meta["data_sha256"],
        relativity=relativity, extended_mass=extended, fit_options=FitOptions(**meta.get("fit_options", {})))



# ---------------------------------------------------------------- posterior
def write_posterior(results, path: Path) -> None:
    """Write ``posterior.h5`` (atomically), every dataset with its SHA-256 checksum."""

    with atomic_path(path) as tmp, h5py.File(tmp, "w") as f:
        f.attrs["orbitmass_version"] = __version__
        f.attrs["burn"] = int(results.burn)
        f.attrs["thin"] = int(results.thin)
        f.attrs["windows"] = json.dumps({v.name: [v.centre, v.width] for v in results.space.variables
                                         if v.kind == "angle"})
        f.attrs["info"] = json.dumps(_jsonable(results.info))
        f.attrs["summary_sha256"] = json_sha256(_summary_key_numbers(results.summary))
        ds = _dataset(f, "samples", results.samples.to_numpy(dtype=float))
        ds.attrs["columns"] = json.dumps(list(results.samples.columns))
        ds = _dataset(f, "theta", np.asarray(results.theta, dtype=float))
        ds.attrs["names"] = json.dumps(results.space.names)
        _dataset(f, "chain", np.asarray(results.chain, dtype=float), compression="gzip", compression_opts=4)
        _dataset(f, "log_prob", np.asarray(results.log_prob, dtype=float), compression="gzip",
                 compression_opts=4)
        _write_target(f.create_group("target"), results.target)


def _verify_arrays(f: h5py.File, path: Path, loaded: dict[str, np.ndarray]) -> None:
    """Raise RunFolderError naming the first dataset whose values differ from its recorded checksum.

    ``loaded`` holds datasets already read (name -> array), so large ones are not read twice.
    """
    names: list[str] = []
    f.visititems(lambda name, obj: names.append(name) if isinstance(obj, h5py.Dataset) else None)
    for name in names:
        recorded = f[name].attrs.get("sha256")
        if recorded is None:  # written before checksums were recorded
            continue
        values = loaded[name] if name in loaded else f[name][()]
        if array_sha256(values) != recorded:
            raise RunFolderError(f"{path}: dataset /{name} does not match the checksum recorded when the run "
                                 "was saved (the file was changed afterwards); refusing to load it: fit again or "
                                 "restore the original run folder")


def _read_summary(path: Path) -> dict:
    try:
        summary = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise RunFolderError(f"{path}: cannot read summary.json ({reason}); expected the JSON object a fit "
                             "writes") from None
    if not isinstance(summary, dict):
        raise RunFolderError(f"{path}: summary.json holds a JSON {type(summary).__name__}, expected a JSON "
                             "object (the summary of a fit)")
    return summary


def load_run(run_dir: Path):
    """Rebuild :class:`~orbitmass.results.Results` from a run folder.

    Raises
    ------
    RunFolderError
        The folder does not exist or is not a complete run folder; a file is
        unreadable; summary.json is not a JSON object; or a stored array or
        summary.json's numbers differ from the checksums recorded at saving.
    """

    run_dir = Path(run_dir)
    summary_path = run_dir / "summary.json"
    post_path = run_dir / "posterior.h5"
    if not run_dir.exists():
        raise RunFolderError(f"{run_dir}: no such folder, so not a run folder (summary.json is missing)")
    if not run_dir.is_dir():
        raise RunFolderError(f"{run_dir}: is a file, not a run folder")
    for p in (summary_path, post_path):
        if not p.is_file():
            raise RunFolderError(f"{run_dir}: not a complete orbitmass run folder ({p.name} is missing)")
    summary = _read_summary(summary_path)
    try:
        with h5py.File(post_path, "r") as f:
            arrays = {name: f[name][()] for name in ("samples", "theta", "chain", "log_prob")}
            _verify_arrays(f, post_path, arrays)
            recorded = f.attrs.get("summary_sha256")
            columns = json.loads(f["samples"].attrs["columns"])
            samples = pd.DataFrame(arrays["samples"], columns=columns)
            theta, chain, log_prob = arrays["theta"], arrays["chain"], arrays["log_prob"]
            burn, thin = int(f.attrs["burn"]), int(f.attrs["thin"])
            windows = json.loads(f.attrs["windows"])
            info = json.loads(f.attrs.get("info", "{}"))
            target = _read_target(f["target"])
    except RunFolderError:
        raise
    except (OSError, KeyError, ValueError, TypeError) as exc:
        raise RunFolderError(f"{post_path}: cannot read the posterior file ({exc})") from None
    if recorded is not None and json_sha256(_summary_key_numbers(summary)) != recorded:
        raise RunFolderError(f"{summary_path}: its numbers do not match posterior.h5 (summary.json was changed "
                             "after the fit or belongs to another run); refusing to load it")
    z = target.distance.redshift
    d_fixed = redshift_distance_pc(z, target.distance.cosmology) if z is not None else None
    terms, term_priors = model_terms(target.relativity, target.extended_mass)  # the fit's own terms
    space = ParameterSpace(target, redshift_distance_pc=d_fixed, windows=windows, terms=terms,
                           term_priors=term_priors)
    return Results(target=target, space=space, samples=samples, theta=theta, chain=chain, log_prob=log_prob,
                   burn=burn, thin=thin, summary=summary, info=info)


# ------------------------------------------------------------------ products
def _check_product_folder(out_dir: Path) -> None:
    """Products go into a new folder or one orbitmass wrote; never over a user's files of the same names."""
    check_writable(out_dir)
    if not out_dir.is_dir():
        return
    clash = sorted(p.name for p in out_dir.iterdir() if p.name in RUN_FILES)
    if clash and not foreign_entries(out_dir, kind=RUN_KIND, known_names=RUN_FILES, known_dirs=RUN_DIRS,
                                     core_names=_CORE_FILES)[0]:
        raise RunFolderError(f"{out_dir}: not a folder orbitmass wrote, and it holds {', '.join(clash)}, which "
                             "writing the report would replace; choose another folder")


def check_run_folder_writable(run_dir: str | os.PathLike[str]) -> Path:
    """Check, before any work, that figures and reports can be (re)written into the run folder ``run_dir``.

    Raises
    ------
    RunFolderError
        ``run_dir`` does not exist, is a file, is read-only, or holds files
        of the user that the products would replace.
    """
    run_dir = Path(run_dir)
    if not run_dir.exists():
        raise RunFolderError(f"{run_dir}: no such folder")
    _check_product_folder(run_dir)
    return run_dir


def write_products(results, out_dir: Path, **options) -> Path:
    """Figures, tables and reports of ``results`` into ``out_dir``; returns report.md's path.

    The folder is checked first (:func:`check_run_folder_writable`; a
    missing one is created), so a read-only folder fails before any figure is
    drawn. Keyword options (``params``, ``units``, ``truths``, ``names``) go to
    :func:`orbitmass.outputs.products.write_products`.
    """
    out_dir = Path(out_dir)
    _check_product_folder(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    marker = read_marker(out_dir)
    report = render_products(results, out_dir, **options)
    if marker is not None and marker.get("kind") == RUN_KIND:  # re-rendered into a run folder: record new files
        files = set(marker["files"]) | {e for e in folder_entries(out_dir) if "/" not in e and e in RUN_FILES}
        write_marker(out_dir, RUN_KIND, files=files, created_utc=marker.get("created_utc"))
    return report


def is_complete_run(run_dir: Path) -> bool:
    """True when ``run_dir`` holds a finished run (summary.json and posterior.h5)."""
    run_dir = Path(run_dir)
    return (run_dir / "summary.json").is_file() and (run_dir / "posterior.h5").is_file()


def target_paths(target: Target) -> list[Path]:
    """The files a target was read from (target file and tables): what a run folder must never replace."""
    sources = [target.source] + [s for c in target.companions for s in
                                 ((c.astrometry.source if c.astrometry else None),
                                  (c.velocities.source if c.velocities else None)) if s]
    out = []
    for src in sources:
        if src and str(src) and Path(src) not in out:
            out.append(Path(src))
    return out


def _copy_inputs(target: Target, dest: Path) -> None:
    dest.mkdir(parents=True, exist_ok=True)
    for src in target_paths(target):
        if not src.is_file():
            continue
        name = src.name
        k = 1
        while (dest / name).exists():
            name = f"{src.stem}-{k}{src.suffix}"
            k += 1
        shutil.copyfile(src, dest / name)


# ------------------------------------------------------------------ the run folder
def _check(out_dir: Path, *, overwrite: bool, protected: Iterable) -> Path:
    return check_output_folder(out_dir, overwrite=overwrite, protected=protected, kind=RUN_KIND,
                               known_names=RUN_FILES, known_dirs=RUN_DIRS, core_names=_CORE_FILES,
                               ignore=(LOCK_NAME,))


def prepare_run_folder(out_dir: str | os.PathLike[str], *, overwrite: bool = False, resume: bool = False,
                       protected: Iterable[str | os.PathLike[str]] = ()) -> FolderLock:
    """Check the run folder ``out_dir`` before any work, create it and take its lock.

    Call this before sampling and hold the returned lock until
    :func:`save_run` (pass it as ``lock=``) has published the run; release it
    with ``lock.release()`` or a ``with`` block. A second writer of the same
    folder gets a :class:`RunFolderError` here. The folder is created if
    needed (with missing parents) and marked as a run folder; a folder created
    here and left empty is removed again on release.

    Parameters
    ----------
    out_dir : path
        The run folder.
    overwrite : bool
        Allow replacing an existing run folder (one orbitmass wrote, holding
        nothing else); it stays in place until the new run is published.
    resume : bool
        The folder holds the checkpoint of a stopped fit to continue; like
        ``overwrite`` it must be a folder orbitmass wrote.
    protected : iterable of path
        Inputs of the job (target file and tables): a folder that is or
        contains one of them is refused.

    Returns
    -------
    FolderLock
        The held lock (``.folder`` is ``out_dir``).

    Raises
    ------
    RunFolderError
        Not writable, a file or under one, the working directory or one of
        its parents, the home folder or ``/``, holding an input, holding
        files orbitmass did not write, non-empty without ``overwrite``, no
        checkpoint to resume, or locked by another process.
    """
    out_dir = Path(out_dir)
    _check(out_dir, overwrite=overwrite or resume, protected=protected)
    if resume and not (out_dir / CHECKPOINT_NAME).is_file():
        raise RunFolderError(f"{out_dir}: no checkpoint ({CHECKPOINT_NAME}) to resume from; start a new fit")
    created = not out_dir.exists()
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise RunFolderError(f"{out_dir}: cannot create the run folder ({exc.strerror or exc})") from None
    lock = FolderLock.acquire(out_dir, created=created)
    try:
        _check(out_dir, overwrite=overwrite or resume or created, protected=protected)  # changed meanwhile?
        if read_marker(out_dir) is None:
            write_marker(out_dir, RUN_KIND)
    except BaseException:
        lock.release()
        raise
    return lock


def _refuse_foreign(out_dir: Path) -> None:
    if not out_dir.is_dir():
        return
    recognised, foreign = foreign_entries(out_dir, kind=RUN_KIND, known_names=RUN_FILES, known_dirs=RUN_DIRS,
                                          core_names=_CORE_FILES)
    others = sorted(p.name for p in out_dir.iterdir() if p.name not in (MARKER_NAME, LOCK_NAME))
    if foreign or (others and not recognised):
        raise RunFolderError(f"{out_dir}: files orbitmass did not write appeared while the fit ran "
                             f"({', '.join(foreign or others)}), so the folder is not replaced")


def save_run(results, out_dir: Path, *, overwrite: bool = False, products: bool = True,
             keep: tuple[str, ...] = (), protected: Iterable[str | os.PathLike[str]] = (),
             lock: FolderLock | None = None) -> Path:
    """Write the whole run folder ``out_dir``.

    The folder is assembled in a hidden sibling staging folder and swapped
    in. Without ``lock``, :func:`prepare_run_folder` is called first (same
    checks and lock, released at the end); with the ``lock`` a caller took
    before the fit, that lock must still be held (and ``overwrite`` was
    decided by that call: the folder it prepared is replaced). Either way the target's
    files (:func:`target_paths`) are protected, and just before the swap the
    folder is checked again: if files orbitmass did not write appeared in it,
    or the lock was lost, the new run is kept beside it as
    ``<name>.unpublished-<random>`` and the error says so. Files of the old
    folder named in ``keep`` (e.g. a checkpoint) are carried over. If the
    figures or reports fail, the run (posterior, summary, inputs) is still
    published and then a :class:`RunFolderError` says what failed.

    Returns
    -------
    Path
        ``out_dir``.

    Raises
    ------
    RunFolderError
        See :func:`prepare_run_folder`; also when the lock is not held.
    """
    out_dir = Path(out_dir)
    protected = [*target_paths(results.target), *protected]
    own = lock is None
    if own:
        lock = prepare_run_folder(out_dir, overwrite=overwrite, protected=protected)
    elif lock.folder.resolve() != out_dir.resolve():
        raise RunFolderError(f"{out_dir}: the lock given is that of another folder ({lock.folder})")
    try:
        lock.verify()
        _check(out_dir, overwrite=True, protected=protected)
        failed = None

        def before_publish(staging: Path) -> None:
            try:
                lock.verify()
                _refuse_foreign(out_dir)
            except RunFolderError as exc:
                kept = out_dir.parent / f"{out_dir.name}.unpublished-{os.urandom(3).hex()}"
                os.replace(staging, kept)
                raise RunFolderError(f"{exc}; the new run is kept in {kept}") from None
            lock.copy_into(staging)  # the folder stays locked across the swap

        with staged_folder(out_dir, before_publish=before_publish) as staging:
            write_posterior(results, staging / "posterior.h5")
            if results.info.get("residuals"):  # (O - C) / sigma per measured value, from inference.quality
                pd.DataFrame(results.info["residuals"]).to_csv(staging / "residuals.csv", index=False)
            _copy_inputs(results.target, staging / "input")
            if products:
                try:
                    write_products(results, staging)
                except Exception as exc:  # a figure or report failed: the samples are still saved
                    log.warning("writing the figures and reports failed", exc_info=True)
                    failed = f"{type(exc).__name__}: {exc}"
            write_json_atomic(results.summary, staging / "summary.json")
            for name in keep:
                if (out_dir / name).is_file():
                    shutil.copy2(out_dir / name, staging / name)
            write_marker(staging, RUN_KIND, files=[e for e in folder_entries(staging) if not e.endswith("/")])
        lock.published = True
    finally:
        if own:
            lock.release()
    if failed:
        raise RunFolderError(f"{out_dir}: the run is saved (summary.json, posterior.h5), but writing its figures "
                             f"and reports failed ({failed}); render them again from the saved run once the cause "
                             "is fixed")
    return out_dir
