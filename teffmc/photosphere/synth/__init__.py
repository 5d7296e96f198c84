"""teffmc's own approximate LTE model-atmosphere synthesis and the built-in grid.

``model_atmosphere(teff, logg, mh)`` returns the converged depth structure,
``surface_flux(teff, logg, mh, wave_A)`` the emergent surface F_lambda of one model,
``build_grid(out_path, workers=2)`` regenerates ``teffmc/data/grid/builtin.h5``
(also ``python -m teffmc.photosphere.synth --out FILE``).

Approximate by design (see the docstrings of atmosphere.py, opacity.py, bands.py): for
publication-grade temperatures users import a validated grid.

Validation (tests/test_synth_*.py, measured at commit time): solar model B-V 0.653,
U-B 0.145, V-Ks 1.545 (haze calibrated on these); TiO 7054 band depth 0.00 at 4500 K and
0.58 at 3400 K (log g 0); every grid model carries sigma Teff^4 within 0.3 %; V fades by
only 0.209 mag from 3650 to 3600 K at log g 0 (the 0.25-0.6 mag target is not met: xfail;
cause measured and described in atmosphere.py).
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
