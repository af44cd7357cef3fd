"""The union of several runs' data as one target, for a joint fit of one central body.

:func:`combined_target` merges targets (from fits, run folders, target files or
:class:`~orbitmass.model.data.Target` objects) by the rules in its docstring;
:func:`orbitmass.compare.refit.combined_refit` fits the result.
"""

from __future__ import annotations

import hashlib
import logging
import math
import os
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from orbitmass.compare.posteriors import RunLike, as_posterior, check_labels, unique_labels
from orbitmass.exceptions import InputError
from orbitmass.io.target import DEFAULT_PRIORS, read_target
from orbitmass.model.data import Astrometry, Companion, Instrument, Target, Velocities
from orbitmass.model.priors import Uniform

__all__ = ["combined_target"]

log = logging.getLogger(__name__)


def _target_of(run: RunLike, label: str | None) -> tuple[Target, str]:
    """The fitted (or to-be-fitted) target of a run, and the run's label."""
    if isinstance(run, Target):
        return run, label or run.name
    if isinstance(run, (str, os.PathLike)) and Path(run).is_file():
        return read_target(run), label or Path(run).resolve().parent.name
    post = as_posterior(run, label)
    if post.results is None:
        raise InputError(f"run {post.label!r} has no target (plain samples); a joint refit needs Fit, "
                         "Results, Target objects, run folders or target files", key="runs")
    return post.results.target, post.label


def _is_full_circle(prior) -> bool:
    return isinstance(prior, Uniform) and prior.high - prior.low >= 2 * math.pi - 1e-9


def _concat(parts: Sequence[Any], cls, names: Sequence[str]):
    """One Astrometry/Velocities table from several, sorted by epoch."""
    order = np.argsort(np.concatenate([p.t_yr for p in parts]), kind="stable")
    arrays = {n: np.concatenate([np.asarray(getattr(p, n)) for p in parts])[order] for n in names}
    source = "; ".join(dict.fromkeys(p.source for p in parts if p.source))
    return cls(**arrays, source=source)


_ASTRO_FIELDS = ("t_yr", "polar", "value1", "value2", "err1", "err2", "corr", "lines")
_VEL_FIELDS = ("t_yr", "rv_kms", "rv_err_kms", "instrument", "central", "lines")


def _merge_companions(name: str, comps: Sequence[Companion], labels: Sequence[str]) -> Companion:
    first = comps[0]
    for c, lab in zip(comps[1:], labels[1:], strict=True):
        if c.priors != first.priors or c.plane != first.plane:
            raise InputError(
                f"companion {name!r} has different priors or planes in runs {labels[0]!r} and "
                f"{lab!r}; merging one companion's data needs identical priors (or use "
                "same_companion='rename' / --same-companion rename)",
                key=f"companion {name}",
            )
    astro = [c.astrometry for c in comps if c.astrometry is not None]
    vel = [c.velocities for c in comps if c.velocities is not None]
    return replace(
        first,
        astrometry=_concat(astro, Astrometry, _ASTRO_FIELDS) if astro else None,
        velocities=_concat(vel, Velocities, _VEL_FIELDS) if vel else None,
    )


#: units of the central-body priors in messages (the stored units)
_CENTRAL_UNITS = {"mass": "Msun", "x0": "mas", "y0": "mas", "vx0": "mas/yr", "vy0": "mas/yr", "vz0": "km/s",
                  "systemic": "km/s"}


def _words(value: Any, other: Any) -> str:
    """A target setting in words for a message (no Python object spelling); of a mapping, the entries that differ."""
    if hasattr(value, "describe"):
        return str(value.describe())
    if isinstance(value, dict) and isinstance(other, dict):
        keys = [k for k in value if value.get(k) != other.get(k)] or list(value)
        return "; ".join(f"{k} {value[k].describe(_CENTRAL_UNITS.get(k, ''))}" if hasattr(value[k], "describe")
                         else f"{k} {value[k]}" for k in keys)
    return str(value)


def _pick(values: Sequence[Any], labels: Sequence[str], what: str, key: str, priors_from: str | None) -> Any:
    if priors_from is not None:
        return values[labels.index(priors_from)]
    for v, lab in zip(values[1:], labels[1:], strict=True):
        if v != values[0]:
            raise InputError(
                f"runs {labels[0]!r} and {lab!r} have different {what} ({_words(values[0], v)} vs "
                f"{_words(v, values[0])}); a joint fit needs one: name the run whose {what} to use "
                f"with priors_from (one of {', '.join(repr(x) for x in labels)})",
                key=key,
            )
    return values[0]


def combined_target(
    runs: Sequence[RunLike],
    *,
    labels: Sequence[str] | None = None,
    same_companion: str = "rename",
    priors_from: str | None = None,
) -> Target:
    """One target holding the data of every run, for a joint fit of one central body.

    Parameters
    ----------
    runs : sequence of Fit, Results, Target or path
        At least two runs: fitted runs, run folders, or (not yet fitted)
        targets and target files; default labels are the folder or target names.
    labels : sequence of str, optional
        One name per run (default as in :func:`compare`); used in renamed names.
    same_companion : {"rename", "merge"}
    priors_from : str, optional
        Label of the run whose central priors and distance to use.

    Returns
    -------
    Target
        Named ``"joint: <label> + <label>..."``; its ``data_sha256`` is the
        SHA-256 of the parts' digests.

    Raises
    ------
    InputError
        On any conflict listed in the Notes, naming the runs and the key.

    Notes
    -----
    Rules of the union:

    - Companions: the union. A name used in more than one run is renamed
      ``"<label>:<name>"`` (``same_companion="rename"``, the default: different
      bodies), or its tables are concatenated into one companion
      (``"merge"``: the same body observed in several runs, e.g. split epoch
      ranges; its priors and plane must then be identical). Plane names used
      in more than one run are renamed the same way with ``"rename"``; with
      ``"merge"`` they are kept, so equal plane names become one plane.
    - Instruments: the union; the same name is the same instrument, and must
      have identical offset and jitter priors in every run. Every run keeps
      its instruments' offset and jitter priors, with one change: a run's
      velocity zero point (the instrument whose offset it fixes) is not the
      joint fit's. The zero point of the first run with velocities stays the
      zero point; a later run that shares no instrument with earlier runs has
      its zero-point instrument's offset sampled with the reader's default
      offset prior (``DEFAULT_PRIORS["offset"]`` of :mod:`orbitmass.io.target`,
      uniform on +-100 km/s), since its zero point relative to the first
      run's is unknown. A later run with several fixed-offset instruments and
      no shared one is refused (one unknown shift cannot be given to several).
    - Central body and distance: the frame, the central priors (total mass,
      frame terms) and the distance information (prior, parallax, redshift,
      cosmology) must be identical in every run, since a joint fit has one of
      each. When they differ the function raises, unless
      ``priors_from=LABEL`` names the run whose central priors, distance and
      reference epoch are taken (the others' are dropped, not multiplied:
      several distance priors usually restate one external measurement).
    - Reference epoch: the first run's (or ``priors_from``'s). When the runs'
      epochs differ, every mean-anomaly prior must be uniform over the full
      circle and the frame relative, because otherwise a prior tied to an
      epoch would change meaning.
    """
    if same_companion not in ("rename", "merge"):
        raise InputError(
            f"same_companion must be 'rename' or 'merge', got {same_companion!r}",
            key="same_companion",
        )
    if isinstance(runs, (str, os.PathLike)) or not isinstance(runs, Sequence) or len(runs) < 2:
        raise InputError("a joint refit needs at least two runs", key="runs")
    given = check_labels(runs, labels)
    pairs = [_target_of(r, lab) for r, lab in zip(runs, given, strict=True)]
    names = unique_labels([lab for _, lab in pairs])
    targets = [t for t, _ in pairs]
    if priors_from is not None and priors_from not in names:
        raise InputError(f"priors_from={priors_from!r} is not one of the run labels {names}", key="priors_from")
    frame = _pick([t.frame for t in targets], names, "frames", "central.frame", None)
    central = _pick([t.central_priors for t in targets], names, "central-body priors", "central", priors_from)
    distance = _pick([t.distance for t in targets], names, "distance information", "distance", priors_from)
    base = targets[names.index(priors_from)] if priors_from is not None else targets[0]
    epochs = {float(t.reference_epoch) for t in targets}
    if len(epochs) > 1:
        tied = [
            f"{lab}:{c.name}"
            for t, lab in zip(targets, names, strict=True)
            for c in t.companions
            if "mean_anomaly" in c.priors and not _is_full_circle(c.priors["mean_anomaly"])
        ]
        if frame == "absolute" or tied:
            why = (
                "the absolute frame's position and motion"
                if frame == "absolute"
                else f"the mean-anomaly priors of {', '.join(tied)}"
            )
            raise InputError(
                "the runs have different reference epochs "
                f"({', '.join(f'{e:g}' for e in sorted(epochs))}) "
                f"and {why} refer to them; give the targets one reference_epoch",
                key="target.reference_epoch",
            )
    instruments = _joint_instruments(targets, names)
    count: dict[str, int] = {}
    plane_count: dict[str, int] = {}
    for t in targets:
        for c in t.companions:
            count[c.name] = count.get(c.name, 0) + 1
        for p in {c.plane for c in t.companions if c.plane}:
            plane_count[p] = plane_count.get(p, 0) + 1
    companions: list[Companion] = []
    merged: dict[str, list[tuple[Companion, str]]] = {}
    for t, lab in zip(targets, names, strict=True):
        safe = lab.replace(".", "_")
        for c in t.companions:
            if count[c.name] > 1 and same_companion == "merge":
                merged.setdefault(c.name, []).append((c, lab))
                if len(merged[c.name]) == 1:
                    companions.append(c)  # placeholder, replaced below
                continue
            new = c
            if count[c.name] > 1:
                new = replace(new, name=f"{safe}:{c.name}")
            if c.plane and plane_count[c.plane] > 1 and same_companion == "rename":
                new = replace(new, plane=f"{safe}:{c.plane}")
            companions.append(new)
    for name, group in merged.items():
        idx = next(i for i, c in enumerate(companions) if c.name == name)
        companions[idx] = _merge_companions(name, [c for c, _ in group], [lab for _, lab in group])
    digest = hashlib.sha256("\n".join(t.data_sha256 for t in targets).encode("utf-8")).hexdigest()
    return Target(
        name="joint: " + " + ".join(names),
        reference_epoch=float(base.reference_epoch),
        frame=frame,
        central_priors=dict(central),
        distance=distance,
        instruments=instruments,
        companions=tuple(companions),
        source="",
        data_sha256=digest,
    )


def _joint_instruments(targets: Sequence[Target], names: Sequence[str]) -> dict[str, Instrument]:
    """The union of the runs' instruments, each run's zero point tied to the first run's (see the Notes above)."""
    given: dict[str, Instrument] = {}  # as each run states it, to check that one name means one instrument
    instruments: dict[str, Instrument] = {}
    owner: dict[str, str] = {}
    zero_point_set = False  # an earlier run has velocities: its zero point is the joint fit's
    for t, lab in zip(targets, names, strict=True):
        used = {str(n) for c in t.companions if c.velocities is not None for n in c.velocities.instrument}
        for iname, inst in t.instruments.items():
            if iname in given and given[iname] != inst:
                raise InputError(
                    f"instrument {iname!r} has different priors in runs {owner[iname]!r} and "
                    f"{lab!r}; the same name means the same instrument: give it identical priors "
                    "or rename it",
                    key=f"instruments.{iname}",
                )
        own = dict(t.instruments)
        if zero_point_set and used and not any(n in given for n in used):
            fixed = [n for n in own if n in used and own[n].offset.fixed]
            if len(fixed) > 1:
                raise InputError(
                    f"run {lab!r} fixes the offsets of several instruments ({', '.join(fixed)}) and shares "
                    "none with the other runs; its velocity zero point relative to theirs is unknown and "
                    "cannot be one shift for several instruments: give all but one of them a free offset prior",
                    key=f"instruments.{fixed[1]}",
                )
            for n in fixed:
                log.info("joint fit: the offset of %r (zero point of run %r) is sampled", n, lab)
                own[n] = replace(own[n], offset=DEFAULT_PRIORS["offset"])
        for iname, inst in own.items():
            given.setdefault(iname, t.instruments[iname])
            instruments.setdefault(iname, inst)
            owner.setdefault(iname, lab)
        zero_point_set = zero_point_set or bool(used)
    return instruments
