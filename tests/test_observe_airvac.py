"""Air <-> vacuum wavelengths (Morton 2000, ApJS 130, 403, eq. 8)."""

import numpy as np
import pytest

from teffmc.observe import air_to_vacuum, vacuum_to_air


def test_5000A_matches_morton_formula_written_out():
    # Morton 2000 eq. 8 evaluated by hand at s = 2 /micron:
    # n - 1 = 8.34254e-5 + 2.406147e-2/126 + 1.5998e-4/34.9 = 2.789734e-4
    # lambda_air = 5000 / 1.0002789734 = 4998.6055 A
    assert vacuum_to_air(5000.0) == pytest.approx(4998.6055, abs=0.01)


@pytest.mark.parametrize(
    ("air", "vac", "source"),
    [
        (6562.80, 6564.61, "H alpha, NIST ASD (from memory)"),
        (5889.950, 5891.583, "Na I D2, NIST ASD (from memory)"),
        (5895.924, 5897.558, "Na I D1, NIST ASD (from memory)"),
    ],
)
def test_published_line_pairs(air, vac, source):
    assert air_to_vacuum(air) == pytest.approx(vac, abs=0.01), source
    assert vacuum_to_air(vac) == pytest.approx(air, abs=0.01), source


def test_agrees_with_specutils_implementation():
    # computed: specutils 2.4 wcs_utils.vac_to_air(method="Morton2000")
    # gives 4998.6055220133985 A at 5000 A vacuum.
    assert vacuum_to_air(5000.0) == pytest.approx(4998.6055220133985, abs=1e-6)


def test_round_trip_is_exact():
    wave = np.geomspace(2000.0, 5.0e4, 1001)
    np.testing.assert_allclose(air_to_vacuum(vacuum_to_air(wave)), wave, rtol=0, atol=1e-8)
    np.testing.assert_allclose(vacuum_to_air(air_to_vacuum(wave)), wave, rtol=0, atol=1e-8)


def test_shift_grows_with_wavelength_and_uv_unchanged():
    wave = np.array([1500.0, 4000.0, 8000.0])
    shift = wave - vacuum_to_air(wave)
    assert shift[0] == 0.0
    # ~1.1 A at 4000 A and ~2.2 A at 8000 A (common practice, no source)
    assert 1.0 < shift[1] < 1.2 and 2.1 < shift[2] < 2.3
