"""Planning a batch: target files, their names, seeds, run folders and identities.

:func:`plan_batch` turns target files and glob patterns into :class:`BatchJob`
objects (plain, picklable values a worker needs). Each run folder is tied to
its target's identity: the resolved path of the target file and the SHA-256 of
the target file and its tables (``data_sha256`` of
:func:`orbitmass.io.target.read_target`), as the run's ``summary.json`` records
them in ``provenance.target_file`` and ``provenance.data_sha256``.
:func:`run_state` compares a run folder with its job: a run is only kept when
both match, so a run is never credited to another target, and a target whose
files changed is fitted again.
"""

from __future__ import annotations

import glob
import hashlib
import json
import logging
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from orbitmass.exceptions import InputError, OrbitmassError
from orbitmass.io.rundir import is_complete_run
from orbitmass.io.target import read_target, read_target_name

__all__ = [
    "BatchJob",
    "FIT_OPTIONS",
    "target_seed",
    "expand_targets",
    "target_name",
    "folder_name",
    "target_checksum",
    "read_summary",
    "run_state",
    "RUN_MATCHES",
    "RUN_STALE",
    "RUN_OTHER_TARGET",
    "RUN_UNFINISHED",
    "plan_batch",
]

log = logging.getLogger(__name__)

#: Fit options a batch may set (the seed is derived per target, progress bars are off on workers)
FIT_OPTIONS = ("n_walkers", "max_steps", "min_steps", "max_periods", "linear")

#: states of a run folder against its job (see :func:`run_state`)
RUN_MATCHES = "matches"
RUN_STALE = "stale"
RUN_OTHER_TARGET = "other target"
RUN_UNFINISHED = "unfinished"


@dataclass(frozen=True)
class BatchJob:
    """One target of a batch: everything a worker needs (plain, picklable values).

    Attributes
    ----------
    name : str
        Target name (``target.name`` of the target file, else the file stem);
        the seed derives from it.
    target_file : str
        Absolute path of the target file.
    run_dir : str
        Absolute path of the run folder to write.
    seed : int
        Seed of this target's fit.
    seed_given : bool
        True when the batch seed was given: ``seed`` then overrides a
        ``[fit] seed`` of the target file; False when it was not, and the
        target's own ``[fit] seed`` (if any) is used instead.
    fit_options : dict
        Keyword arguments of :class:`orbitmass.fit.Fit` besides ``seed``.
    products : bool
        Write figures, tables and reports (False: summary, posterior and
        input copies only; ``orbitmass report RUN_DIR`` adds them later).
    data_sha256 : str or None
        SHA-256 of the target file and its tables when planned (None: the
        target could not be read; its fit will record why).
    timeout : float or None
        Wall-clock limit of the fit in seconds (None: none).
    """

    name: str
    target_file: str
    run_dir: str
    seed: int
    fit_options: dict = field(default_factory=dict)
    seed_given: bool = True
    products: bool = True
    data_sha256: str | None = None
    timeout: float | None = None


def target_seed(batch_seed: int, name: str) -> int:
    """Seed of target ``name`` in a batch of seed ``batch_seed``.

    ``numpy.random.SeedSequence([batch_seed, w0, ..., w7])`` where ``w0..w7``
    are the SHA-256 digest of the UTF-8 name as big-endian 32-bit words; the
    first 32-bit word of its state, shifted right by one, is the seed
    (0 <= seed < 2**31).

    Parameters
    ----------
    batch_seed : int
        Seed of the batch (>= 0).
    name : str
        Target name.

    Returns
    -------
    int
        The target's seed, the same in every batch of that seed.

    Raises
    ------
    InputError
        ``batch_seed`` is negative or not a whole number.

    Examples
    --------
    >>> target_seed(0, "Tessaly 41 AB") == target_seed(0, "Tessaly 41 AB")
    True
    >>> target_seed(0, "Tessaly 41 AB") != target_seed(1, "Tessaly 41 AB")
    True
    """
    if isinstance(batch_seed, bool) or not isinstance(batch_seed, (int, np.integer)) or batch_seed < 0:
        raise InputError(f"the batch seed must be a whole number >= 0, got {batch_seed!r}", key="seed")
    digest = hashlib.sha256(name.encode("utf-8")).digest()
    words = [int.from_bytes(digest[k : k + 4], "big") for k in range(0, 32, 4)]
    state = np.random.SeedSequence([int(batch_seed), *words]).generate_state(1, dtype=np.uint32)
    return int(state[0]) >> 1


def expand_targets(patterns: Sequence[str | os.PathLike]) -> list[Path]:
    """Target files named by ``patterns`` (paths or glob patterns), in order, without repeats.

    A pattern with glob characters (``*``, ``?``, ``[``; ``**`` recurses) is
    expanded and sorted; a plain path is kept even if it does not exist (the
    fit then records it as failed).

    Raises
    ------
    InputError
        No patterns, or a glob pattern that matches no file.
    """
    if isinstance(patterns, (str, os.PathLike)):
        patterns = [patterns]
    if not patterns:
        raise InputError("no targets given; expected target files or glob patterns", key="targets")
    seen: set[Path] = set()
    out: list[Path] = []
    for pattern in patterns:
        text = os.fspath(pattern)
        if glob.has_magic(text):
            matches = sorted(Path(p) for p in glob.glob(text, recursive=True) if Path(p).is_file())
            if not matches:
                raise InputError(f"the pattern {text!r} matches no file", key="targets")
        else:
            matches = [Path(text)]
        for path in matches:
            resolved = path.resolve()
            if resolved not in seen:
                seen.add(resolved)
                out.append(resolved)
    return out


def target_name(path: Path) -> str:
    """``target.name`` of a target file (:func:`orbitmass.io.target.read_target_name`, so a
    byte-order mark does not change it), or its stem when it has none or cannot be read."""
    if not Path(path).is_file():  # only regular files (a FIFO would block); the fit records why
        return Path(path).stem
    try:
        name = read_target_name(path)
    except OrbitmassError:
        return Path(path).stem
    return name if name else Path(path).stem


def folder_name(name: str) -> str:
    """A file-system-safe folder name for a target name (letters, digits, ``. _ -``)."""
    slug = re.sub(r"[^A-Za-z0-9._-]+", "-", name).strip("-.")
    return slug or "target"


def _check_fit_options(fit_options: Mapping[str, Any] | None) -> dict:
    options = dict(fit_options or {})
    for key in options:
        if key not in FIT_OPTIONS:
            raise InputError(
                f"unknown fit option {key!r}; a batch accepts {', '.join(FIT_OPTIONS)} "
                "(the seed is derived per target)",
                key=f"fit_options.{key}",
            )
    return options


def target_checksum(path: str | os.PathLike) -> str | None:
    """SHA-256 of a target file and its tables (``data_sha256``), or None when it cannot be read."""
    try:
        return read_target(path).data_sha256 or None
    except OrbitmassError:
        return None


def read_summary(run_dir: str | os.PathLike) -> dict | None:
    """The run's ``summary.json`` as a dict, or None when the run is incomplete or it is unreadable."""
    run_dir = Path(run_dir)
    if not is_complete_run(run_dir):
        return None
    try:
        summary = json.loads((run_dir / "summary.json").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError):
        return None
    return summary if isinstance(summary, dict) else None


def _recorded_target(summary: Mapping[str, Any]) -> tuple[str | None, str | None]:
    prov = summary.get("provenance")
    prov = prov if isinstance(prov, dict) else {}
    path, digest = prov.get("target_file"), prov.get("data_sha256")
    path = str(Path(path).resolve()) if isinstance(path, str) and path else None
    return path, digest if isinstance(digest, str) and digest else None


def run_state(job: BatchJob, summary: Mapping[str, Any] | None = None) -> str:
    """How the run folder of ``job`` stands against the job's target.

    Parameters
    ----------
    job : BatchJob
    summary : mapping, optional
        The run's summary when already read (else read from ``job.run_dir``).

    Returns
    -------
    str
        :data:`RUN_MATCHES` (a complete run of this target file with these
        contents: keep it), :data:`RUN_STALE` (a run of this target file, but
        the file or its tables changed since, or cannot be read now: refit),
        :data:`RUN_OTHER_TARGET` (a complete run of another target file: never
        credit or overwrite it) or :data:`RUN_UNFINISHED` (no complete,
        readable run: fit).
    """
    if summary is None:
        summary = read_summary(job.run_dir)
    if summary is None:
        return RUN_UNFINISHED
    path, digest = _recorded_target(summary)
    if path != str(Path(job.target_file).resolve()):
        return RUN_OTHER_TARGET
    if job.data_sha256 is None or digest != job.data_sha256:
        return RUN_STALE
    return RUN_MATCHES


def _existing_runs(runs: Path) -> dict[str, str | None]:
    """Folder name (lower case) -> recorded target file of every complete, readable run in ``runs``."""
    out: dict[str, str | None] = {}
    if not runs.is_dir():
        return out
    for folder in runs.iterdir():
        if folder.name.startswith(".") or not folder.is_dir():
            continue
        summary = read_summary(folder)
        if summary is not None:
            out[folder.name.lower()] = _recorded_target(summary)[0]
    return out


def plan_batch(
    targets: Sequence[str | os.PathLike],
    out_dir: str | os.PathLike,
    *,
    seed: int | None = 0,
    fit_options: Mapping[str, Any] | None = None,
    products: bool = True,
    timeout: float | None = None,
) -> list[BatchJob]:
    """The jobs of a batch: one per target file, with its run folder, seed and identity.

    Run folders are ``out_dir/runs/<name>`` with the target name made safe for
    file systems. When several targets give the same folder name, each keeps
    the folder that already holds a complete run of its own target file (so
    reordering the targets or adding one changes nothing for the others); the
    rest take the first of ``<name>``, ``<name>-2``, ``<name>-3``, ... that
    no other target uses and that holds no other target's complete run.

    Parameters
    ----------
    targets : sequence of str or path
        Target files or glob patterns (see :func:`expand_targets`).
    out_dir : str or path
        Batch folder.
    seed : int or None
        Batch seed (see :func:`target_seed`); None: not given, so a target's
        ``[fit] seed`` is used where it has one, and otherwise the seed
        derived from batch seed 0.
    fit_options : mapping, optional
        Options of :class:`orbitmass.fit.Fit`: ``n_walkers``, ``max_steps``,
        ``min_steps``, ``max_periods``, ``linear``. They override the
        ``[fit]`` table of each target file (which applies where they are not given).
    products : bool
        Write figures, tables and reports into each run folder.
    timeout : float, optional
        Wall-clock limit of each fit in seconds (> 0).

    Returns
    -------
    list of BatchJob

    Raises
    ------
    InputError
        No targets, a pattern matching nothing, a bad seed, timeout or an unknown fit option.
    """
    options = _check_fit_options(fit_options)
    if timeout is not None:
        if isinstance(timeout, bool) or not isinstance(timeout, (int, float)) or not (
                math.isfinite(timeout) and timeout > 0):
            raise InputError(f"the time limit per target must be a number of seconds > 0, got {timeout!r}",
                             key="timeout")
        timeout = float(timeout)
    runs = Path(out_dir).resolve() / "runs"
    paths = expand_targets(targets)
    names = [target_name(path) for path in paths]
    bases = [folder_name(name) for name in names]
    existing = _existing_runs(runs)
    folders: list[str | None] = [None] * len(paths)
    used: set[str] = set()
    # first: every target keeps a folder that already holds its own run
    for i, (path, base) in enumerate(zip(paths, bases, strict=True)):
        pattern = re.compile(rf"{re.escape(base.lower())}(-[0-9]+)?")
        for folder, recorded in sorted(existing.items()):
            if recorded == str(path) and folder not in used and pattern.fullmatch(folder):
                folders[i] = next(f.name for f in runs.iterdir() if f.name.lower() == folder)
                used.add(folder)
                break
    # then: the first free name, never one holding another target's complete run
    for i, (path, base) in enumerate(zip(paths, bases, strict=True)):
        if folders[i] is not None:
            continue
        folder, k = base, 2
        while folder.lower() in used or existing.get(folder.lower(), str(path)) != str(path):
            folder, k = f"{base}-{k}", k + 1
        if folder != base:
            log.warning("targets share the folder name %r; %s goes to runs/%s", base, path, folder)
        folders[i] = folder
        used.add(folder.lower())
    return [
        BatchJob(
            name=name,
            target_file=str(path),
            run_dir=str(runs / folder),
            seed=target_seed(0 if seed is None else seed, name),
            seed_given=seed is not None,
            fit_options=options,
            products=products,
            data_sha256=target_checksum(path),
            timeout=timeout,
        )
        for path, name, folder in zip(paths, names, folders, strict=True)
    ]
