"""The package version, in one place (read by ``pyproject.toml`` and written into every run folder)."""

import platform

import astropy
import emcee
import numpy
import pandas
import scipy

__version__ = "0.1.0"


def software_versions() -> dict[str, str]:
    """Versions of Python and the numerical stack, recorded in every run folder."""
    return {"orbitmass": __version__, "python": platform.python_version(), "numpy": numpy.__version__,
            "scipy": scipy.__version__, "emcee": emcee.__version__, "astropy": astropy.__version__,
            "pandas": pandas.__version__}
