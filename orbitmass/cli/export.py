"""``orbitmass export``: a saved run's posterior as a NetCDF (ArviZ) file or a CSV table.

Parsing and exit codes only; the work is :func:`orbitmass.io.export.export_run`.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from orbitmass.exceptions import RunFolderError
from orbitmass.io.export import export_run, format_from_path

__all__ = ["add_parser", "run"]


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``export`` on the ``orbitmass`` sub-command parsers."""
    p = subparsers.add_parser(
        "export", help="write a saved run's posterior samples as NetCDF (ArviZ) or CSV",
        description="Write every retained posterior sample of RUN_DIR to FILE. netcdf: an ArviZ InferenceData "
                    "(walkers as chains; read it with arviz.from_netcdf; needs arviz: pip install "
                    "'orbitmass[export]'); csv: one row per sample, one column per quantity, the unit in each "
                    "column name. FILE is never replaced unless --overwrite is given.")
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder written by 'orbitmass fit'")
    p.add_argument("--format", choices=("netcdf", "csv"), default=None,
                   help="file format (default: from the suffix of FILE: .nc for netcdf, .csv for csv)")
    p.add_argument("--out", required=True, metavar="FILE", help="file to write (missing folders are created)")
    p.add_argument("--overwrite", action="store_true", help="replace FILE if it exists")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    """Run ``orbitmass export``; returns the exit code (errors propagate as OrbitmassError)."""

    fmt = args.format or format_from_path(args.out)
    try:
        path = export_run(Path(args.run_dir), args.out, fmt, overwrite=args.overwrite)
    except RunFolderError as exc:
        if getattr(exc, "remedy", None) == "overwrite":  # name the option of this command
            raise RunFolderError(f"{args.out}: exists; choose another --out or pass --overwrite to replace it") \
                from None
        raise
    print(f"exported {fmt}: {path}")
    return 0
