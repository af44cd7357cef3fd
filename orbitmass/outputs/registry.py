"""Renderer registry: every output format of a run, by name, behind one contract.

Contract of a renderer
    A renderer is a function ``render(results, out_dir, **options) -> list[Path]``:

    - ``results`` is a :class:`~orbitmass.results.Results`; ``out_dir`` an
      existing or creatable folder. It writes only the files it declared at
      registration (``files``, names relative to ``out_dir``), each atomically
      (:func:`orbitmass.outputs.style.write_atomic` or
      :func:`orbitmass.outputs.style.save_figure`), and returns their paths.
    - It reads ``results`` only (never modifies it), changes no global state
      (no matplotlib backend or rc switch, no pyplot figure), prints nothing,
      and accepts and may ignore unknown keyword options (a report takes
      ``figures=``, a table ``params=`` and ``units=``).
    - ``kind`` is ``"figure"``, ``"table"`` or ``"report"``; :func:`render_all`
      runs figures first, so that reports can embed them.

    A name is registered once (:func:`register` raises on a second
    registration); the contract test in ``tests/outputs/test_outputs.py`` runs
    over every registered renderer.

Adding a format
    Write the function, then ``register("table.fits", func, kind="table",
    files=("table.fits",))`` in the module that defines it and import that
    module in :mod:`orbitmass.outputs.products`.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["Renderer", "RENDERERS", "register", "render", "render_all"]

_KINDS = ("figure", "table", "report")


@dataclass(frozen=True)
class Renderer:
    """A registered output format."""

    name: str
    func: Callable[..., list[Path]]
    kind: str
    files: tuple[str, ...]
    description: str = ""


#: name -> :class:`Renderer`, in registration order
RENDERERS: dict[str, Renderer] = {}


def register(name: str, func: Callable[..., list[Path]], *, kind: str, files: Sequence[str],
             description: str = "") -> Renderer:
    """Register ``func`` under ``name`` (once).

    Raises
    ------
    ValueError
        For a name already registered, an unknown ``kind`` or no declared file.
    """
    if name in RENDERERS:
        raise ValueError(f"renderer {name!r} is already registered")
    if kind not in _KINDS:
        raise ValueError(f"renderer kind must be one of {', '.join(_KINDS)}, got {kind!r}")
    if not files:
        raise ValueError(f"renderer {name!r} declares no file")
    r = Renderer(name, func, kind, tuple(files), description)
    RENDERERS[name] = r
    return r


def render(name: str, results: Any, out_dir: str | os.PathLike[str], **options: Any) -> list[Path]:
    """Run the renderer ``name`` into ``out_dir`` (created if missing)."""
    if name not in RENDERERS:
        raise KeyError(f"no renderer {name!r}; registered: {', '.join(RENDERERS)}")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    return list(RENDERERS[name].func(results, out, **options))


def render_all(results: Any, out_dir: str | os.PathLike[str], *, names: Sequence[str] | None = None,
               **options: Any) -> dict[str, list[Path]]:
    """Run renderers (default: all) in the order figures, tables, reports.

    Reports receive ``figures=`` (figure name -> PNG path relative to ``out_dir``)
    of the figures written before them, unless the caller passes its own.
    """
    chosen = [RENDERERS[n] for n in (names if names is not None else RENDERERS)]
    chosen.sort(key=lambda r: _KINDS.index(r.kind))
    written: dict[str, list[Path]] = {}
    figures: dict[str, str] = {}
    for r in chosen:
        opts = dict(options)
        if r.kind == "report":
            opts.setdefault("figures", dict(figures))
        paths = render(r.name, results, out_dir, **opts)
        written[r.name] = paths
        if r.kind == "figure":
            png = [p for p in paths if p.suffix == ".png"]
            if png:
                figures[r.name] = png[0].name
    return written
