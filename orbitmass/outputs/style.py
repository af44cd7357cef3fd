"""One shared look for every orbitmass figure, applied locally, never globally.

The style is a plain dictionary of matplotlib rc settings (:data:`RC`) that
:func:`style_context` applies through :func:`matplotlib.rc_context`; importing
this module changes nothing in matplotlib. Figures are sized for journal
columns (:data:`SINGLE_COLUMN_IN`, :data:`DOUBLE_COLUMN_IN`) with fonts of
8-9 pt, so they can be printed at 100 % without rescaling.

Colours
    :data:`PALETTE` is the colour-blind-safe set of eight colours of
    Okabe & Ito (2008), "Color Universal Design (CUD): how to make figures and
    presentations that are friendly to colorblind people",
    https://jfly.uni-koeln.de/color/ (sRGB values as given there).

Files
    :func:`save_figure` writes a PNG and a vector PDF side by side, each first
    to a temporary file in the destination folder and then moved into place
    with :func:`os.replace`, so a reader never sees a half-written file.
    :func:`write_atomic` does the same for text and bytes.
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

from orbitmass._atomic import atomic_file as _atomic
from orbitmass._atomic import write_atomic

__all__ = [
    "PALETTE",
    "SINGLE_COLUMN_IN",
    "DOUBLE_COLUMN_IN",
    "RC",
    "MARKERS",
    "style_context",
    "figure_size",
    "save_figure",
    "write_atomic",
]

logger = logging.getLogger(__name__)

#: Width (inches) of one column of a two-column journal page (A&A, MNRAS, ApJ: 3.3-3.5 in).
SINGLE_COLUMN_IN = 3.5
#: Width (inches) of a full page-width figure (A&A 17 cm, MNRAS 174 mm, ApJ 7.1 in).
DOUBLE_COLUMN_IN = 7.2

#: Okabe & Ito (2008) colour-blind-safe palette, by name.
PALETTE: dict[str, str] = {
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "bluish_green": "#009E73",
    "orange": "#E69F00",
    "reddish_purple": "#CC79A7",
    "sky_blue": "#56B4E9",
    "yellow": "#F0E442",
    "black": "#000000",
}

#: Marker cycle for instruments (distinct shapes, so colour is never the only cue).
MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P", "X", "<", ">")

_CYCLE = [
    PALETTE[k]
    for k in (
        "blue",
        "vermillion",
        "bluish_green",
        "orange",
        "reddish_purple",
        "sky_blue",
        "black",
        "yellow",
    )
]

#: rc settings of the orbitmass style (applied only inside :func:`style_context`).
RC: dict[str, Any] = {
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "mathtext.fontset": "dejavusans",
    "font.size": 8.0,
    "axes.labelsize": 9.0,
    "axes.titlesize": 9.0,
    "xtick.labelsize": 8.0,
    "ytick.labelsize": 8.0,
    "legend.fontsize": 8.0,
    "figure.titlesize": 9.0,
    "axes.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": False,
    "axes.prop_cycle": None,  # filled below (needs cycler)
    "axes.formatter.useoffset": False,
    "axes.formatter.limits": (-4, 5),
    "axes.formatter.use_mathtext": False,  # mathtext tick labels are slow to lay out
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.minor.width": 0.4,
    "ytick.minor.width": 0.4,
    "xtick.major.size": 3.0,
    "ytick.major.size": 3.0,
    "xtick.direction": "out",
    "ytick.direction": "out",
    "lines.linewidth": 1.0,
    "lines.markersize": 3.5,
    "errorbar.capsize": 0.0,
    "legend.frameon": False,
    "legend.handlelength": 1.5,
    "figure.dpi": 100,
    "savefig.dpi": 200,
    "savefig.bbox": "tight",
    "savefig.pad_inches": 0.03,
    "pdf.fonttype": 42,  # embed TrueType, not Type 3: journals and editors accept it
    "ps.fonttype": 42,
    "svg.fonttype": "none",
    "image.cmap": "cividis",  # perceptually uniform and colour-blind safe
}


def _rc() -> dict[str, Any]:
    from cycler import cycler  # start-up time: loaded only when needed

    rc = dict(RC)
    rc["axes.prop_cycle"] = cycler(color=_CYCLE)
    return rc


@contextlib.contextmanager
def style_context(**overrides: Any) -> Iterator[None]:
    """Apply the orbitmass style (plus ``overrides``) inside a ``with`` block.

    Parameters
    ----------
    **overrides
        Extra rc settings; keys use dots, which Python keywords cannot, so
        pass them as ``**{"font.size": 9}``.

    Examples
    --------
    >>> import matplotlib
    >>> before = matplotlib.rcParams["font.size"]
    >>> with style_context():
    ...     inside = matplotlib.rcParams["font.size"]
    >>> inside, matplotlib.rcParams["font.size"] == before
    (8.0, True)
    """
    import matplotlib  # start-up time: loaded only when needed

    rc = _rc()
    rc.update(overrides)
    with matplotlib.rc_context(rc):
        yield


def figure_size(columns: int = 1, aspect: float = 0.75) -> tuple[float, float]:
    """Figure size (inches) for a journal figure.

    Parameters
    ----------
    columns : {1, 2}
        Single column (:data:`SINGLE_COLUMN_IN`) or page width (:data:`DOUBLE_COLUMN_IN`).
    aspect : float
        Height / width.

    Returns
    -------
    (float, float)
        Width and height in inches.

    Raises
    ------
    ValueError
        If ``columns`` is not 1 or 2, or ``aspect`` is not positive.
    """
    if columns not in (1, 2):
        raise ValueError(f"columns must be 1 or 2, got {columns!r}")
    if not aspect > 0:
        raise ValueError(f"aspect must be positive, got {aspect!r}")
    width = SINGLE_COLUMN_IN if columns == 1 else DOUBLE_COLUMN_IN
    return (width, width * aspect)


def save_figure(
    fig: Any,
    path_without_suffix: str | os.PathLike[str],
    *,
    formats: Sequence[str] = ("png", "pdf"),
    dpi: int = 200,
) -> list[Path]:
    """Save ``fig`` once per format, each file written atomically.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    path_without_suffix : str or path-like
        Destination without extension, e.g. ``out/orbit``; the folder must exist.
    formats : sequence of str
        Matplotlib format names, e.g. ``("png", "pdf")`` (raster beside vector).
    dpi : int
        Resolution of raster formats (dots per inch).

    Returns
    -------
    list of Path
        The written files, in the order of ``formats``.
    """
    base = Path(path_without_suffix)
    written = []
    with style_context():
        for fmt in formats:
            fmt = fmt.lower().lstrip(".")
            dest = base.parent / f"{base.name}.{fmt}"
            # no creation date in the PDF: identical figures give identical files
            meta = {"CreationDate": None} if fmt == "pdf" else {"Software": "orbitmass"}
            with _atomic(dest) as fh:
                fig.savefig(fh, format=fmt, dpi=dpi, metadata=meta)
            logger.debug("wrote %s", dest)
            written.append(dest)
    return written
