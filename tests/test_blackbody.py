"""Blackbody photosphere against astropy and the radiation constants."""

import numpy as np
import pytest
from astropy import units as u
from astropy.modeling.models import BlackBody

from teffmc.photosphere import BlackbodyGrid, planck_surface_flux


# Values: docs/references.md#radiation-laws-and-constants,
# "computed with astropy, astropy.modeling.models.BlackBody"
@pytest.mark.parametrize("teff, wave_um, b_si", [
    (3600.0, 0.55, 1.654226e12),   # W m^-2 m^-1 sr^-1
    (5772.0, 0.50, 2.623854e13),
])
def test_planck_matches_reference_table(teff, wave_um, b_si):
    f = planck_surface_flux([wave_um * 1e4], teff)[0, 0]      # erg s^-1 cm^-2 A^-1
    b_cgs_per_A = f / np.pi
    b_si_ours = b_cgs_per_A * 1e-7 * 1e4 * 1e10                # -> W m^-2 m^-1 sr^-1
    assert b_si_ours == pytest.approx(b_si, rel=2e-6)


@pytest.mark.parametrize("teff", [2600.0, 3600.0, 5772.0, 9600.0, 30000.0])
def test_blackbody_grid_matches_astropy_to_1e6(teff):
    wave = np.geomspace(2000.0, 50000.0, 300)
    grid = BlackbodyGrid(wave)
    _, ours = grid.spectrum(teff)
    bb = BlackBody(temperature=teff * u.K, scale=1.0 * u.erg / (u.s * u.cm**2 * u.AA * u.sr))
    ref = np.pi * bb(wave * u.AA).to_value(u.erg / (u.s * u.cm**2 * u.AA * u.sr))
    np.testing.assert_allclose(ours, ref, rtol=1e-6)


def test_surface_flux_integrates_to_sigma_t4():
    # Stefan-Boltzmann law, sigma = 5.670374419e-8 W m^-2 K^-4 (CODATA 2018)
    teff = 3600.0
    wave = np.geomspace(300.0, 3.0e6, 200000)
    f = planck_surface_flux(wave, teff)[0]
    total = np.trapezoid(f, wave) * 1e-3   # erg s^-1 cm^-2 -> W m^-2
    assert total == pytest.approx(5.670374419e-8 * teff**4, rel=1e-4)
