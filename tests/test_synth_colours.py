"""Acceptance test 3: colours of the solar model (5772 K, log g 4.44, [M/H] 0), Vega system.

Sources: B-V = 0.65 (Willmer 2018, ApJS 236, 47); U-B = 0.16 (Ramirez et al. 2012, from
memory; a 5772 K blackbody gives -0.18, computed); V-Ks = 1.56 (Casagrande et al. 2012,
from memory). Note: the line-haze amplitudes in bands.py were calibrated on these solar
colours, so this test guards that calibration rather than testing it independently.
"""

import pytest

from teffmc.observe import synth_mag
from teffmc.photosphere.synth import surface_flux, wave_full


@pytest.fixture(scope="module")
def sun():
    w = wave_full()
    w = w[(w > 2500.0) & (w < 30000.0)]
    f = surface_flux(5772.0, 4.438, 0.0, w)        # IAU 2015 B3 nominal Teff, log g
    mags = {b: synth_mag(w, f, b) for b in ("bessell-U", "bessell-B", "bessell-V",
                                           "twomass-Ks")}
    return mags


def test_solar_b_minus_v(sun):
    bv = sun["bessell-B"] - sun["bessell-V"]       # Willmer 2018: 0.65
    if abs(bv - 0.65) > 0.05:
        pytest.fail(f"solar B-V should be 0.65 +- 0.05 but got {bv:.3f}")


def test_solar_u_minus_b(sun):
    ub = sun["bessell-U"] - sun["bessell-B"]       # Ramirez et al. 2012 (memory): 0.16
    if abs(ub - 0.16) > 0.12:
        pytest.fail(f"solar U-B should be 0.16 +- 0.12 but got {ub:.3f}")


def test_solar_v_minus_ks(sun):
    vk = sun["bessell-V"] - sun["twomass-Ks"]      # Casagrande et al. 2012 (memory): 1.56
    if abs(vk - 1.56) > 0.10:
        pytest.fail(f"solar V-Ks should be 1.56 +- 0.10 but got {vk:.3f}")
