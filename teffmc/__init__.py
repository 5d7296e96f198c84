"""teffmc: effective temperatures of cool stars with honest uncertainties.

The public API is imported lazily so that ``import teffmc`` stays fast and the
command line starts quickly.
"""

from importlib import import_module
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("teffmc")
except PackageNotFoundError:  # running from a source tree without installing
    __version__ = "0+unknown"

_API = {
    "load_grid": "teffmc.photosphere",
    "synth_mag": "teffmc.observe",
    "extinction_curve": "teffmc.dust",
    "grain_optics": "teffmc.dust",
    "fit": "teffmc.run",
    "fit_many": "teffmc.batch",
}

__all__ = ["__version__", "load_grid", "synth_mag", "extinction_curve", "grain_optics", "fit",
           "fit_many"]


def __getattr__(name):
    if name in _API:
        return getattr(import_module(_API[name]), name)
    raise AttributeError(f"module 'teffmc' has no attribute {name!r}")
