"""Run folders in, a comparison folder out: what ``orbitmass compare`` does.

:func:`compare_folders` loads saved runs, optionally refits their data jointly,
compares them with each other and with reference values and writes the
comparison folder. Every check of the arguments happens before any work.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

from orbitmass.compare.comparison import Comparison, compare
from orbitmass.compare.posteriors import MassPosterior, check_labels, unique_labels
from orbitmass.compare.references import Reference, parse_reference
from orbitmass.compare.refit import combined_refit
from orbitmass.compare.report import check_out_dir
from orbitmass.exceptions import InputError
from orbitmass.fit import load

__all__ = ["compare_folders"]


def compare_folders(
    run_dirs: Sequence[str | os.PathLike[str]],
    out_dir: str | os.PathLike[str],
    *,
    references: Sequence[str | Reference] = (),
    labels: Sequence[str | None] | None = None,
    refit: bool = False,
    same_companion: str = "rename",
    priors_from: str | None = None,
    seed: int = 1,
    max_steps: int = 20000,
    overwrite: bool = False,
    progress: bool | None = None,
) -> Comparison:
    """Compare saved runs (and optionally their joint refit) and write ``out_dir``.

    Parameters
    ----------
    run_dirs : sequence of path
        Run folders written by a fit.
    out_dir : path
        Comparison folder to write (see :meth:`Comparison.write`); must be new
        or empty unless ``overwrite``.
    references : sequence of str or Reference
        Reference masses (:func:`~orbitmass.compare.references.parse_reference`).
    labels : sequence of str or None, optional
        One name per run; None (or a None entry): the folder's name.
    refit : bool
        Also fit the union of the runs' data jointly (written to ``out_dir/combined``).
    same_companion, priors_from
        As in :func:`~orbitmass.compare.merge.combined_target`; ``priors_from`` needs ``refit``.
    seed : int
        Seed of the resampling and of the refit (>= 0).
    max_steps : int
        Step cap of the refit (>= 1).
    overwrite : bool
        Replace a non-empty ``out_dir``.
    progress : bool or None
        Progress bar of the refit (None: only on a terminal).

    Returns
    -------
    Comparison
        As written; ``comparison.combined.converged`` tells whether the refit converged.

    Raises
    ------
    InputError
        Bad arguments, before anything is loaded or written.
    RunFolderError
        ``out_dir`` is a file or a non-empty folder without ``overwrite``; an unreadable run folder.
    """
    run_dirs = [Path(d) for d in run_dirs]
    names = check_labels(run_dirs, labels, key="labels")
    refs = [parse_reference(r, key=f"references[{i}]") for i, r in enumerate(references)]
    out = Path(out_dir)
    check_out_dir(out, overwrite)
    if isinstance(max_steps, bool) or not isinstance(max_steps, int) or max_steps < 1:
        raise InputError(f"max_steps must be a whole number >= 1, got {max_steps!r}", key="max_steps")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise InputError(f"seed must be a whole number >= 0, got {seed!r}", key="seed")
    if len(run_dirs) < 2 and not refs:
        raise InputError("one run and no reference value: nothing to compare", key="run_dirs")
    if priors_from is not None and not refit:
        raise InputError("priors_from only applies to a joint refit", key="priors_from")
    fits = [load(d) for d in run_dirs]
    names = unique_labels([lab if lab is not None else d.resolve().name for d, lab in zip(run_dirs, names,
                                                                                             strict=True)])
    joint = None
    if refit:
        joint = combined_refit(fits, seed=seed, labels=names, same_companion=same_companion,
                               priors_from=priors_from, max_steps=max_steps, progress=progress)
    posts = [MassPosterior.from_results(f.results, n, source=str(d))
             for f, n, d in zip(fits, names, run_dirs, strict=True)]
    cmp = compare(posts, references=refs, combined=joint, seed=seed)
    cmp.write(out, overwrite=overwrite)
    return cmp
