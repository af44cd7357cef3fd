"""Command line: argument parsing and exit codes only; everything else is the public API.

One module per command group (``fit``, ``demo``, ``report``, ``compare``,
``batch``), each with ``add_parser(subparsers)`` and ``run(args) -> int``,
registered in :data:`orbitmass.cli.main.COMMANDS`; shared argument types and
the error-to-exit-code mapping are in :mod:`orbitmass.cli.common`.

Exit codes: 0 success; 1 the fit ran but did not converge; 2 bad input or
options (one clear message, no traceback); 130 interrupted (samples so far
are saved).
"""

from __future__ import annotations

from orbitmass.cli.main import build_parser, main

__all__ = ["main", "build_parser"]
