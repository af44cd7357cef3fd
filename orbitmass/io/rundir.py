"""Run folders: what a fit leaves on disk, and reading it back.

Layout (output contract, extended)::

    summary.json        machine-readable results (schema in the output contract)
    posterior.h5        HDF5: every retained sample (see below), chain, target data
    report.md, report.html, table.tex, table.csv, table.md
    corner.png/.pdf, orbit.png/.pdf, trace.png/.pdf
    input/              verbatim copies of the target file and its tables

``posterior.h5`` holds ``/samples`` (float64, ``(n_samples, n_columns)``,
attribute ``columns``: JSON list of column names, units in the names),
``/theta`` (the same samples in the sampled variables, attribute ``names``),
``/chain`` ``(n_steps, n_walkers, n_dim)`` and ``/log_prob`` of the whole run,
and ``/target``: the data arrays and a JSON description of every prior, so a
run loads back exactly without the original files. Attributes ``burn``,
``thin``, ``windows`` (angle-window centres) and ``orbitmass_version``.
Read it with h5py or :func:`orbitmass.load`.

Every file is written to a temporary name and renamed into place; a whole
run folder is assembled beside its destination and renamed at the end, so a
crash never leaves a half-written ``summary.json``. An existing, non-empty
folder is only replaced with ``overwrite=True``.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import tempfile
from dataclasses import fields
from pathlib import Path

import h5py
import numpy as np
import pandas as pd

from orbitmass.exceptions import RunFolderError
from orbitmass.model.data import Astrometry, Companion, Distance, Instrument, Target, Velocities
from orbitmass.model.priors import FAMILIES, Prior

__all__ = ["save_run", "load_run", "write_products", "write_json_atomic", "is_complete_run"]

log = logging.getLogger(__name__)


# ----------------------------------------------------------------- atomic I/O
def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _publish(tmp: str | Path, path: Path, *, folder: bool = False) -> None:
    """Give a temporary file or folder the permissions a plain open() would, then rename it."""
    os.chmod(tmp, (0o777 if folder else 0o666) & ~_umask())
    os.replace(tmp, path)


def write_json_atomic(obj, path: Path) -> None:
    """Write ``obj`` as JSON to ``path`` via a temporary file and a rename."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump(_jsonable(obj), fh, indent=2, allow_nan=False)
            fh.flush()
            os.fsync(fh.fileno())
        _publish(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def _jsonable(obj):
    """Plain JSON types; non-finite floats become null so the file is strict JSON."""
    if isinstance(obj, float | np.floating):
        value = float(obj)
        return value if np.isfinite(value) else None
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    return obj


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
    }
    group.attrs["meta"] = json.dumps(_jsonable(meta))
    for k, c in enumerate(target.companions):
        if c.astrometry is not None:
            g = group.create_group(f"companion{k}/astrometry")
            for name in ("t_yr", "polar", "value1", "value2", "err1", "err2", "corr", "lines"):
                g.create_dataset(name, data=np.asarray(getattr(c.astrometry, name)))
        if c.velocities is not None:
            g = group.create_group(f"companion{k}/velocities")
            for name in ("t_yr", "rv_kms", "rv_err_kms", "central", "lines"):
                g.create_dataset(name, data=np.asarray(getattr(c.velocities, name)))
            g.create_dataset("instrument", data=np.asarray(c.velocities.instrument, dtype="S"))


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
    return Target(
        name=meta["name"], reference_epoch=meta["reference_epoch"], frame=meta["frame"],
        central_priors={k: _prior_from_dict(v) for k, v in meta["central_priors"].items()},
        distance=Distance(prior=None if d["prior"] is None else _prior_from_dict(d["prior"]),
                          parallax=None if d["parallax"] is None else _prior_from_dict(d["parallax"]),
                          redshift=d["redshift"], cosmology=d["cosmology"]),
        instruments={i["name"]: Instrument(name=i["name"], offset=_prior_from_dict(i["offset"]),
                                           jitter=_prior_from_dict(i["jitter"])) for i in meta["instruments"]},
        companions=tuple(comps), source=meta["source"], data_sha256=meta["data_sha256"])


# ---------------------------------------------------------------- posterior
def write_posterior(results, path: Path) -> None:
    """Write ``posterior.h5`` (atomically)."""
    from orbitmass import __version__

    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    os.close(fd)
    try:
        with h5py.File(tmp, "w") as f:
            f.attrs["orbitmass_version"] = __version__
            f.attrs["burn"] = int(results.burn)
            f.attrs["thin"] = int(results.thin)
            f.attrs["windows"] = json.dumps({v.name: [v.centre, v.width] for v in results.space.variables
                                             if v.kind == "angle"})
            f.attrs["info"] = json.dumps(_jsonable(results.info))
            ds = f.create_dataset("samples", data=results.samples.to_numpy(dtype=float))
            ds.attrs["columns"] = json.dumps(list(results.samples.columns))
            ds = f.create_dataset("theta", data=np.asarray(results.theta, dtype=float))
            ds.attrs["names"] = json.dumps(results.space.names)
            f.create_dataset("chain", data=np.asarray(results.chain, dtype=float), compression="gzip",
                             compression_opts=4)
            f.create_dataset("log_prob", data=np.asarray(results.log_prob, dtype=float), compression="gzip",
                             compression_opts=4)
            _write_target(f.create_group("target"), results.target)
        _publish(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def load_run(run_dir: Path):
    """Rebuild :class:`~orbitmass.results.Results` from a run folder."""
    from orbitmass.core.cosmology import redshift_distance_pc
    from orbitmass.model.parameters import ParameterSpace
    from orbitmass.results import Results

    run_dir = Path(run_dir)
    summary_path = run_dir / "summary.json"
    post_path = run_dir / "posterior.h5"
    for p in (summary_path, post_path):
        if not p.is_file():
            raise RunFolderError(f"{run_dir}: not a complete orbitmass run folder ({p.name} is missing)")
    try:
        summary = json.loads(summary_path.read_text(encoding="utf-8"))
        with h5py.File(post_path, "r") as f:
            columns = json.loads(f["samples"].attrs["columns"])
            samples = pd.DataFrame(f["samples"][()], columns=columns)
            theta = f["theta"][()]
            chain = f["chain"][()]
            log_prob = f["log_prob"][()]
            burn, thin = int(f.attrs["burn"]), int(f.attrs["thin"])
            windows = json.loads(f.attrs["windows"])
            info = json.loads(f.attrs.get("info", "{}"))
            target = _read_target(f["target"])
    except (OSError, KeyError, ValueError, json.JSONDecodeError) as exc:
        raise RunFolderError(f"{run_dir}: cannot read the run folder ({exc})") from None
    z = target.distance.redshift
    d_fixed = redshift_distance_pc(z, target.distance.cosmology) if z is not None else None
    space = ParameterSpace(target, redshift_distance_pc=d_fixed, windows=windows)
    return Results(target=target, space=space, samples=samples, theta=theta, chain=chain, log_prob=log_prob,
                   burn=burn, thin=thin, summary=summary, info=info)


# ------------------------------------------------------------------ products
def write_products(results, out_dir: Path) -> Path:
    """Figures, tables and reports of ``results`` into ``out_dir``; returns report.md's path."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    from orbitmass.outputs import plots, reports
    from orbitmass.outputs.style import save_figure

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    figures = {}
    # the trace figure is a diagnostic of many noisy lines: a lower resolution keeps it light
    for name, func, dpi in (("corner", plots.corner_figure, 200), ("orbit", plots.orbit_figure, 200),
                            ("trace", plots.trace_figure, 110)):
        fig = func(results)
        save_figure(fig, out_dir / name, dpi=dpi)
        plt.close(fig)
        figures[name] = f"{name}.png"
    reports.write_tables(results, out_dir)
    reports.write_report(results, out_dir, figures)
    return out_dir / "report.md"


def is_complete_run(run_dir: Path) -> bool:
    """True when ``run_dir`` holds a finished run (summary.json and posterior.h5)."""
    run_dir = Path(run_dir)
    return (run_dir / "summary.json").is_file() and (run_dir / "posterior.h5").is_file()


def _copy_inputs(target: Target, dest: Path) -> None:
    dest.mkdir(parents=True, exist_ok=True)
    sources = [target.source] + [s for c in target.companions for s in
                                 ((c.astrometry.source if c.astrometry else None),
                                  (c.velocities.source if c.velocities else None)) if s]
    seen = set()
    for src in sources:
        if not src or src in seen or not Path(src).is_file():
            continue
        seen.add(src)
        name = Path(src).name
        k = 1
        while (dest / name).exists():
            name = f"{Path(src).stem}-{k}{Path(src).suffix}"
            k += 1
        shutil.copyfile(src, dest / name)


def save_run(results, out_dir: Path, *, overwrite: bool = False, products: bool = True,
             keep: tuple[str, ...] = ()) -> Path:
    """Write the whole run folder ``out_dir``.

    The folder is assembled beside ``out_dir`` and renamed into place. An
    existing non-empty ``out_dir`` is replaced only with ``overwrite=True``
    (it is moved aside first and removed only after the new one is in place).
    Files of the old folder named in ``keep`` (e.g. a checkpoint) are carried over.

    Raises
    ------
    RunFolderError
        ``out_dir`` exists and is not empty, and ``overwrite`` is False; or it is a file.
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise RunFolderError(f"{out_dir}: exists and is not a folder; choose another --out")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not overwrite:
        raise RunFolderError(f"{out_dir}: folder exists and is not empty; choose another --out or "
                             "pass --overwrite (overwrite=True) to replace it")
    parent = out_dir.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(dir=parent, prefix=f".{out_dir.name}.staging-"))
    try:
        write_posterior(results, staging / "posterior.h5")
        _copy_inputs(results.target, staging / "input")
        if products:
            write_products(results, staging)
        write_json_atomic(results.summary, staging / "summary.json")
        for name in keep:
            if (out_dir / name).is_file():
                shutil.copy2(out_dir / name, staging / name)
        if out_dir.exists():
            aside = Path(tempfile.mkdtemp(dir=parent, prefix=f".{out_dir.name}.old-"))
            os.rmdir(aside)
            os.replace(out_dir, aside)
            _publish(staging, out_dir, folder=True)
            shutil.rmtree(aside, ignore_errors=True)
        else:
            _publish(staging, out_dir, folder=True)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return out_dir



