"""Acceptance test 4: energy conservation (Stefan-Boltzmann) of the synthesis and the grid.

Source: Stefan-Boltzmann law, sigma = 5.670374419e-8 W m^-2 K^-4 (CODATA 2018). The
emergent flux, integrated over 0.1-200 um plus the Rayleigh-Jeans tail, must equal
sigma Teff^4 within 3 % with no rescaling: the radiative-equilibrium temperature
correction must make the atmosphere carry it.
"""

from importlib.resources import files

import numpy as np
import pytest

from teffmc.photosphere.grid import Grid
from teffmc.photosphere.synth import bolometric_deviation, surface_flux, wave_fine, wave_full
from teffmc.photosphere.synth.constants import SIGMA

BUILTIN = files("teffmc") / "data" / "grid" / "builtin.h5"


@pytest.mark.parametrize("teff, logg, mh", [(2600.0, 5.0, 0.5), (3500.0, 0.0, -1.0),
                                            (7000.0, -1.0, 0.0)])
def test_model_carries_sigma_teff4(teff, logg, mh):
    # representative corners of the grid (cool dwarf with H2O/TiO, metal-poor RSG, hot
    # supergiant); Stefan-Boltzmann law within 3 %
    w = wave_full()
    dev = bolometric_deviation(w, surface_flux(teff, logg, mh, w), teff)
    if not abs(dev) < 0.03:
        pytest.fail(f"F_bol/(sigma Teff^4) - 1 at {teff, logg, mh} should be within "
                    f"+-0.03 but got {dev:+.4f}")


def test_bolometric_deviation_of_a_blackbody():
    # the integrator itself: a 3000 K blackbody on the extended axis, Stefan-Boltzmann law
    from teffmc.photosphere.synth.radiation import planck
    w = wave_full()
    dev = bolometric_deviation(w, np.pi * planck(w, np.array([3000.0]))[0], 3000.0)
    if abs(dev) > 2e-3:
        pytest.fail(f"blackbody F_bol should be sigma T^4 within 0.2 % but got {dev:+.5f}")


@pytest.fixture(scope="module")
def grid():
    if not BUILTIN.is_file():
        pytest.fail(f"built-in grid missing: {BUILTIN}")
    return Grid.read(str(BUILTIN))


def test_grid_build_checked_every_model(grid):
    # every node was checked at build time (Stefan-Boltzmann, 3 %); the maximum deviation
    # is stored in the provenance and no node is missing
    dev = float(grid.provenance["energy_max_abs_deviation"])
    if not dev < 0.03:
        pytest.fail(f"max |F_bol/(sigma Teff^4) - 1| of the grid should be < 0.03 but got {dev}")
    if grid.holes:
        pytest.fail(f"built-in grid has missing nodes: {grid.holes[:5]}")


def test_grid_flux_inside_0p3_5um_is_below_sigma_teff4(grid):
    # the stored 0.3-5 um part can only hold part of sigma Teff^4 (Stefan-Boltzmann law):
    # between 80 % and 100.5 % of it for every node of the grid (a blackbody has 85-97 %)
    w = grid.wave
    f = 10.0 ** grid.log_flux.astype(float)
    frac = np.sum(0.5 * (f[..., 1:] + f[..., :-1]) * np.diff(w), axis=-1)
    frac /= SIGMA * grid.teff[:, None, None] ** 4
    if not (frac.min() > 0.80 and frac.max() < 1.005):
        pytest.fail(f"0.3-5 um flux fraction should lie in (0.80, 1.005) but spans "
                    f"{frac.min():.3f}..{frac.max():.3f}")


def test_grid_node_matches_fresh_synthesis(grid):
    # the file holds what the code computes: one node recomputed from a grey start
    # (the build warm-starts along Teff, so agreement is to the convergence level)
    i, j, k = (int(np.argmin(abs(grid.teff - 3600.0))), int(np.argmin(abs(grid.logg))),
               int(np.argmin(abs(grid.mh))))
    f = surface_flux(grid.teff[i], grid.logg[j], grid.mh[k], wave_fine())
    d = np.abs(np.log10(f) - grid.log_flux[i, j, k])
    if not np.median(d) < 0.01:
        pytest.fail(f"grid node differs from a fresh model by median {np.median(d):.4f} dex")
