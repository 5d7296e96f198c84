"""teffmc's own approximate LTE model-atmosphere synthesis and the built-in grid.

``model_atmosphere(teff, logg, mh)`` returns the converged depth structure,
``surface_flux(teff, logg, mh, wave_A)`` the emergent surface F_lambda of one model,
``build_grid(out_path, workers=2)`` regenerates ``teffmc/data/grid/builtin.h5``
(also ``python -m teffmc.photosphere.synth --out FILE``).

Approximate by design (see the docstrings of atmosphere.py, opacity.py, bands.py): for
publication-grade temperatures users import a validated grid.
"""

from .atmosphere import Atmosphere, model_atmosphere, wave_fine, wave_full
from .build import LOGG, MH, TEFF, bolometric_deviation, build_grid, surface_flux

__all__ = [
           "LOGG",
           "MH",
           "TEFF",
           "Atmosphere",
           "bolometric_deviation",
           "build_grid",
           "model_atmosphere",
           "surface_flux",
           "wave_fine",
           "wave_full",
]
