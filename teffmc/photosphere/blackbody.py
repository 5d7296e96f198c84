"""Blackbody photosphere: Planck surface flux behind the grid interface.

Useful for hot stars, for tests, and as the simplest possible model. It has no
molecular bands, so it cannot measure the temperature of a cool star from its
spectrum: for M-type stars use the built-in grid or an imported one.
"""

import numpy as np

from ..constants import C_CGS, H_CGS, K_CGS
from ..errors import OffGridError

__all__ = ["BlackbodyGrid", "planck_surface_flux"]



def planck_surface_flux(wave_A, teff):
    """Surface flux pi*B_lambda(T) [erg s^-1 cm^-2 Angstrom^-1].

    Parameters
    ----------
    wave_A : array_like
        Wavelengths [Angstrom].
    teff : array_like
        Temperatures [K]; shape (n,) gives an (n, n_wave) result.
    """
    lam = np.asarray(wave_A, float) * 1e-8  # cm
    t = np.atleast_1d(np.asarray(teff, float))[:, None]
    x = H_CGS * C_CGS / (lam * K_CGS * t)
    b_lam = 2.0 * H_CGS * C_CGS**2 / lam**5 / np.expm1(x)  # erg s^-1 cm^-2 cm^-1 sr^-1
    return np.pi * b_lam * 1e-8


class BlackbodyGrid:
    """Planck photosphere with the :class:`~teffmc.photosphere.grid.Grid` interface.

    ``logg`` and ``mh`` are accepted (so configs and fits work unchanged) and have no
    effect on the flux; their nominal ranges are wide.
    """

    name = "blackbody"
    BOUNDS = {"teff": (1000.0, 60000.0), "logg": (-2.0, 6.0), "mh": (-5.0, 1.0)}

    def __init__(self, wave=None):
        if wave is None:
            wave = np.geomspace(900.0, 6.0e5, 20000)
        self.wave = np.asarray(wave, float)
        self.provenance = {"source": "Planck's law (CODATA 2018 constants), computed"}
        self.bounds = dict(self.BOUNDS)
        self.holes = []
        self.teff = np.array(self.BOUNDS["teff"])
        self.logg = np.array(self.BOUNDS["logg"])
        self.mh = np.array(self.BOUNDS["mh"])

    @property
    def checksum(self):
        """Return ``"blackbody"``: the curve is a formula, there is no file to hash."""
        return "blackbody"

    def describe(self):
        """Return a few lines of text describing this photosphere (``teffmc grid info``)."""
        return (f"name: blackbody (Planck surface flux, exact at every Teff)\n"
                f"teff: {self.BOUNDS['teff'][0]:g} .. {self.BOUNDS['teff'][1]:g} K\n"
                f"wave: {self.wave.size} pixels, {self.wave[0]:.1f} .. {self.wave[-1]:.1f} "
                "Angstrom (vacuum)\nlogg, mh: ignored")

    def check_inside(self, teff, logg, mh):
        """Return a boolean array: which points lie inside :attr:`BOUNDS`."""
        teff, logg, mh = np.broadcast_arrays(*(np.asarray(v, float) for v in (teff, logg, mh)))
        ok = np.ones(teff.shape, bool)
        for ax, v in zip(("teff", "logg", "mh"), (teff, logg, mh)):
            ok &= (v >= self.bounds[ax][0]) & (v <= self.bounds[ax][1])
        return ok

    nuisance = ()            # a Planck curve has no uncertain physics
    nuisance_names = ()

    def interpolate(self, teff, logg, mh, nuisance=None):
        """Return the surface flux [erg s^-1 cm^-2 Angstrom^-1] at a batch, (n, n_wave).

        Exact Planck curves; ``logg``, ``mh`` and ``nuisance`` only have to be in bounds.
        Raises OffGridError for the first point outside :attr:`BOUNDS`.
        """
        teff, logg, mh = np.broadcast_arrays(
            *(np.atleast_1d(np.asarray(v, float)) for v in (teff, logg, mh)))
        inside = self.check_inside(teff, logg, mh)
        if not inside.all():
            k = int(np.argmin(inside))
            raise OffGridError({"teff": teff[k], "logg": logg[k], "mh": mh[k]}, self.bounds)
        return planck_surface_flux(self.wave, teff)

    def interpolate_log(self, teff, logg, mh, nuisance=None):
        """Return log10 of :meth:`interpolate`, shape (n, n_wave)."""
        return np.log10(self.interpolate(teff, logg, mh))

    def spectrum(self, teff, logg=0.0, mh=0.0):
        """Return one spectrum: ``(wave [Angstrom, vacuum], surface F_lambda)``."""
        return self.wave.copy(), self.interpolate(teff, logg, mh)[0]

    def on_pixels(self, wave, *, resolution=None, fwhm_A=None, average=False):
        """Return the same photosphere evaluated on ``wave`` [Angstrom, vacuum].

        A Planck curve is smooth, so the line-spread function (or the hat average) changes
        it by far less than any data error and is skipped.
        """
        return BlackbodyGrid(wave)
