"""The batch catalogue: one row per target, as a table, written atomically.

:func:`catalogue_row` turns a run's ``summary.json`` into a row,
:func:`failed_row` records a target that could not be fitted (with a short
``reason``), :func:`catalogue_frame` makes the table and
:func:`write_catalogue` writes ``catalogue.csv`` (and ``catalogue.parquet``
when pyarrow is installed).
"""

from __future__ import annotations

import logging
import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from orbitmass._atomic import atomic_path
from orbitmass.batch.plan import BatchJob

__all__ = [
    "STATUS_CONVERGED",
    "STATUS_NOT_CONVERGED",
    "STATUS_FAILED",
    "POOR_FIT_SUFFIX",
    "FIT_OK",
    "FIT_POOR",
    "base_status",
    "REASON_INPUT",
    "REASON_TIMEOUT",
    "REASON_CRASH",
    "REASON_INTERRUPTED",
    "REASON_CANCELLED",
    "REASON_FOLDER",
    "ELEMENTS",
    "catalogue_row",
    "failed_row",
    "catalogue_frame",
    "write_catalogue",
]

log = logging.getLogger(__name__)

STATUS_CONVERGED = "converged"
STATUS_NOT_CONVERGED = "not converged"
STATUS_FAILED = "failed"
#: appended to the status of a run whose goodness of fit is poor, e.g. "converged, poor fit"
POOR_FIT_SUFFIX = ", poor fit"
#: the ``fit_status`` column: summary.json ``fit_quality.status``
FIT_OK = "ok"
FIT_POOR = "poor"

#: the ``reason`` of a failed row
REASON_INPUT = "bad input"
REASON_TIMEOUT = "timeout"
REASON_CRASH = "crash"
REASON_INTERRUPTED = "interrupted"
REASON_CANCELLED = "cancelled"
REASON_FOLDER = "run folder taken"

#: companion elements in the catalogue (summary.json keys of ``companions.<name>``)
ELEMENTS = ("period_yr", "eccentricity", "inclination_deg", "semimajor_axis_mas")
_DIAGNOSTICS = ("ess_min", "ess_mass", "tau_max", "rhat_max", "n_steps", "wall_seconds")
_QUANTILES = ("median", "q16", "q84", "q2.5", "q97.5")


def _block(summary_block: Mapping | None, prefix: str, keys: Sequence[str]) -> dict[str, float]:
    block = summary_block or {}
    return {f"{prefix}_{q}": _float(block.get(q)) for q in keys}


def _float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _base_row(job: BatchJob, status: str, error: str | None, seed: int | None, skipped: bool,
              reason: str | None = None) -> dict:
    return {
        "name": job.name,
        "target_file": job.target_file,
        "run_dir": job.run_dir,
        "status": status,
        "error": error,
        "reason": reason,
        "note": None,
        "skipped": skipped,
        "seed": seed,
    }


def catalogue_row(job: BatchJob, summary: Mapping[str, Any], *, skipped: bool = False) -> dict[str, Any]:
    """One catalogue row from a run's ``summary.json`` content.

    Parameters
    ----------
    job : BatchJob
    summary : mapping
        The run's summary (output contract).
    skipped : bool
        True when the run folder was complete before this batch and was kept.

    Returns
    -------
    dict
        Plain values: identity, status, seed (as recorded in the run's
        provenance), mass (Msun) and distance (pc) quantiles, diagnostics, and
        per companion ``c<k>_name`` plus median/q16/q84 of :data:`ELEMENTS`.
    """
    diag = summary.get("diagnostics", {}) or {}
    converged = bool(diag.get("converged", False))
    seed = (summary.get("provenance", {}) or {}).get("seed", job.seed)
    fq = summary.get("fit_quality")
    fit_status = fq.get("status") if isinstance(fq, Mapping) else None
    status = STATUS_CONVERGED if converged else STATUS_NOT_CONVERGED
    if fit_status == FIT_POOR:
        status += POOR_FIT_SUFFIX
    row = _base_row(
        job,
        status,
        None,
        int(seed) if seed is not None else None,
        skipped,
    )
    row["fit_status"] = fit_status
    derived = summary.get("derived", {}) or {}
    row.update(_block(derived.get("mass_msun"), "mass_msun", _QUANTILES))
    row.update(_block(derived.get("distance_pc"), "distance_pc", _QUANTILES))
    row["converged"] = converged
    row.update({key: _float(diag.get(key)) for key in _DIAGNOSTICS})
    row["finished_utc"] = (summary.get("provenance", {}) or {}).get("created_utc")
    for k, (comp, elements) in enumerate((summary.get("companions", {}) or {}).items(), start=1):
        row[f"c{k}_name"] = comp
        for element in ELEMENTS:
            row.update(_block(elements.get(element), f"c{k}_{element}", _QUANTILES[:3]))
    return row


def base_status(status: str) -> str:
    """The sampling part of a catalogue status: ``"converged, poor fit"`` -> ``"converged"``."""
    return status[: -len(POOR_FIT_SUFFIX)] if status.endswith(POOR_FIT_SUFFIX) else status


def failed_row(job: BatchJob, error: BaseException | str, reason: str = REASON_CRASH) -> dict[str, Any]:
    """The catalogue row of a target whose fit failed (message ``"<Type>: <text>"``).

    ``reason`` is one of ``REASON_*`` (``"bad input"``, ``"timeout"``, ``"crash"``,
    ``"interrupted"``, ``"cancelled"``, ``"run folder taken"``).
    """
    text = error if isinstance(error, str) else f"{type(error).__name__}: {error}"
    return _base_row(job, STATUS_FAILED, text, job.seed, False, reason)


def catalogue_frame(rows: Sequence[Mapping[str, Any]]) -> pd.DataFrame:
    """The catalogue table from rows, with a fixed column order and types.

    Columns: ``name``, ``target_file``, ``run_dir``, ``status`` (converged /
    not converged / failed; ``", poor fit"`` appended when the goodness of fit
    is poor, e.g. ``"converged, poor fit"``), ``error``, ``reason`` (of a
    failure: bad input, timeout, crash, interrupted, cancelled, run folder
    taken), ``note`` (e.g. a run saved whose figures failed), ``skipped``
    (complete run kept from an earlier batch), ``seed``; ``mass_msun_*`` and
    ``distance_pc_*`` (``median``, ``q16``, ``q84``, ``q2.5``, ``q97.5``; Msun
    and pc); ``converged``, ``fit_status`` (summary.json
    ``fit_quality.status``: ok / poor; empty for a failed target or a run
    without it), ``ess_min``, ``ess_mass``, ``tau_max``, ``rhat_max``,
    ``n_steps``, ``wall_seconds``, ``finished_utc`` (UTC, ISO 8601); then per
    companion k (at least one set) ``c<k>_name`` and ``c<k>_<element>_median``
    / ``_q16`` / ``_q84`` for ``period_yr`` (rest frame), ``eccentricity``,
    ``inclination_deg`` and ``semimajor_axis_mas``. Failed targets have empty
    result columns.
    """
    n_comp = 1
    for row in rows:
        while f"c{n_comp + 1}_name" in row:
            n_comp += 1
    columns = ["name", "target_file", "run_dir", "status", "error", "reason", "note", "skipped", "seed"]
    columns += [f"{q}_{s}" for q in ("mass_msun", "distance_pc") for s in _QUANTILES]
    columns += ["converged", "fit_status", *_DIAGNOSTICS, "finished_utc"]
    for k in range(1, n_comp + 1):
        columns.append(f"c{k}_name")
        columns += [f"c{k}_{e}_{s}" for e in ELEMENTS for s in _QUANTILES[:3]]
    frame = pd.DataFrame([dict(row) for row in rows], columns=columns)
    text = {"name", "target_file", "run_dir", "status", "error", "reason", "note", "fit_status", "finished_utc"} | {
        f"c{k}_name" for k in range(1, n_comp + 1)
    }
    for col in columns:
        if col in text:
            frame[col] = frame[col].astype("string")
        elif col == "seed":
            frame[col] = frame[col].astype("Int64")
        elif col == "converged":
            frame[col] = frame[col].astype("boolean")
        elif col == "skipped":
            frame[col] = frame[col].fillna(False).astype(bool)
        else:
            frame[col] = frame[col].astype(float)
    return frame


def write_catalogue(catalogue: pd.DataFrame, out_dir: str | os.PathLike) -> list[Path]:
    """Write ``catalogue.csv`` (and ``catalogue.parquet`` if pyarrow imports) atomically.

    Each file is written to a temporary file beside it and renamed into
    place, so a reader never sees half a table.

    Returns
    -------
    list of Path
        The files written.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written = [out / "catalogue.csv"]
    with atomic_path(written[0]) as tmp:  # orbitmass._atomic: temporary file beside it, then os.replace
        catalogue.to_csv(tmp, index=False)
    try:
        import pyarrow  # noqa: F401  (optional dependency: Parquet only when it is installed)
    except ImportError:
        if (out / "catalogue.parquet").exists():
            log.warning(
                "pyarrow is not installed: %s is from an earlier batch and out of date",
                out / "catalogue.parquet",
            )
        return written
    written.append(out / "catalogue.parquet")
    with atomic_path(written[1]) as tmp:
        catalogue.to_parquet(tmp, index=False, engine="pyarrow")
    return written
