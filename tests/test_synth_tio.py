"""Acceptance test 1: the TiO gamma band near 7054 A switches on between 4500 and 3400 K.

Source: common practice, no source (docs/references.md#stellar-atmospheres-and-tio: TiO bands
appear below roughly 4000 K and deepen steeply towards ~3500 K).
"""

import numpy as np
import pytest

from teffmc.photosphere.synth import surface_flux, wave_fine

# Band-depth measure (our definition): mean flux over 7060-7150 A (the gamma (0,0) heads
# at 7054/7088/7126 A and their red-degraded tails) divided by a pseudo-continuum
# interpolated linearly between the means of the windows 7020-7045 A (blue of the head)
# and 7400-7450 A (between the gamma (0,0) and (0,1) sequences); depth = 1 - ratio.
BLUE, RED, BAND = (7020.0, 7045.0), (7400.0, 7450.0), (7060.0, 7150.0)


def band_depth(w, f):
    def sel(r):
        return (w > r[0]) & (w < r[1])
    x1, x2 = w[sel(BLUE)].mean(), w[sel(RED)].mean()
    y1, y2 = f[sel(BLUE)].mean(), f[sel(RED)].mean()
    wb = w[sel(BAND)]
    cont = y1 + (y2 - y1) * (wb - x1) / (x2 - x1)
    return 1.0 - f[sel(BAND)].mean() / cont.mean()


@pytest.fixture(scope="module")
def wave():
    w = wave_fine()
    return w[(w > 6900.0) & (w < 7600.0)]


def test_band_depth_measure_on_synthetic_band(wave):
    # the measure itself: a flat continuum with a 40 % deep box in the band -> 0.40
    f = np.ones_like(wave)
    f[(wave > BAND[0]) & (wave < BAND[1])] = 0.6
    if abs(band_depth(wave, f) - 0.4) > 1e-12:
        pytest.fail(f"band depth of a 40 % box should be 0.4 but got {band_depth(wave, f)}")


def test_tio_weak_at_4500K(wave):
    # common practice, no source: < 5 % deep at 4500 K, log g 0, [M/H] 0
    d = band_depth(wave, surface_flux(4500.0, 0.0, 0.0, wave))
    if not d < 0.05:
        pytest.fail(f"TiO 7054 band depth at 4500 K should be < 0.05 but got {d:.3f}")


def test_tio_strong_at_3400K(wave):
    # common practice, no source: > 30 % deep at 3400 K, log g 0, [M/H] 0
    d = band_depth(wave, surface_flux(3400.0, 0.0, 0.0, wave))
    if not d > 0.30:
        pytest.fail(f"TiO 7054 band depth at 3400 K should be > 0.30 but got {d:.3f}")
