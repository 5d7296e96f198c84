"""Interstellar extinction laws: published/computed check values and the table."""

import astropy.units as u
import numpy as np
import pytest

from teffmc.dust import LAWS, ExtinctionTable, extinction_curve
from teffmc.errors import ConfigError, DataError

WAVE_UM = np.array([0.365, 0.44, 0.55, 0.70, 0.90, 1.25, 1.65, 2.2])
# CCM89 at R_V = 3.1, computed with dust_extinction 1.7 (docs/references.md#extinction-laws)
CCM89_REF = np.array([1.5569, 1.3245, 0.9989, 0.7502, 0.4788, 0.2821, 0.1804, 0.1135])
G23_UM = np.array([0.44, 0.55, 0.65, 0.80, 1.25, 1.65, 2.2])
# G23 (Gordon et al. 2023) at R_V = 3.1, computed with dust_extinction
# (docs/references.md#extinction-laws)
G23_REF = np.array([1.3204, 0.9985, 0.8134, 0.5900, 0.2685, 0.1682, 0.1031])


def test_ccm89_reference_row():
    got = extinction_curve("CCM89", 3.1, WAVE_UM * 1e4)
    np.testing.assert_allclose(got, CCM89_REF, atol=1e-3)


def test_ccm89_table3_from_memory():
    # Cardelli, Clayton & Mathis 1989 Table 3 (from memory): U, B, R, I, J, K at their
    # effective wavelengths; H omitted (its tabulated 0.190 is the value I recall least well).
    lam = np.array([0.360, 0.437, 0.700, 0.900, 1.250, 2.194]) * 1e4
    ref = np.array([1.569, 1.337, 0.751, 0.479, 0.282, 0.114])
    np.testing.assert_allclose(extinction_curve("CCM89", 3.1, lam), ref, atol=0.01)


def test_g23_reference_row():
    got = extinction_curve("G23", 3.1, G23_UM * 1e4)
    np.testing.assert_allclose(got, G23_REF, atol=1e-3)


def test_quantity_input_is_converted_not_read_as_inverse_micron():
    a = extinction_curve("CCM89", 3.1, WAVE_UM * u.micron)
    b = extinction_curve("CCM89", 3.1, (WAVE_UM * 1e3) * u.nm)
    np.testing.assert_allclose(a, CCM89_REF, atol=1e-3)
    np.testing.assert_allclose(b, a, rtol=1e-12)


@pytest.mark.parametrize("law", sorted(LAWS))
@pytest.mark.parametrize("r_v", [2.5, 3.1, 5.0])
def test_colour_excess_is_one_over_rv(law, r_v):
    # E(B-V)/A_V = 1/R_V by definition (docs/references.md#extinction-laws). B and V are
    # taken at 0.44 and 0.55 micron, only near each law's own normalisation points:
    # F99/F04 are then off by up to 0.022 (computed), the others by < 0.005 (computed).
    tol = 0.025 if law in ("F99", "F04") else 0.006
    a_b, a_v = extinction_curve(law, r_v, [4400.0, 5500.0])
    assert abs((a_b - a_v) / a_v - 1.0 / r_v) < tol


def test_unknown_law_lists_allowed_names():
    with pytest.raises(ConfigError) as err:
        extinction_curve("XYZ", 3.1, [5500.0])
    for name in ("CCM89", "O94", "F99", "G23"):
        assert name in str(err.value)


def test_out_of_range_wavelength_is_refused_not_extrapolated():
    with pytest.raises(DataError, match="valid from 1000 to 33333.3 Angstrom"):
        extinction_curve("CCM89", 3.1, [5000.0, 40000.0])


def test_rv_outside_law_range():
    with pytest.raises(ConfigError, match="should be in"):
        extinction_curve("G23", 7.0, [5500.0])


def test_table_fixed_rv_is_exact_and_refuses_other_values():
    wave = np.linspace(3500.0, 10000.0, 50)
    tab = ExtinctionTable("F99", wave, r_v=3.1)
    got = tab.curve(np.full(4, 3.1))
    assert got.shape == (4, 50)
    np.testing.assert_array_equal(got[2], extinction_curve("F99", 3.1, wave))
    with pytest.raises(ConfigError, match="fixed at 3.1"):
        tab.curve([3.1, 3.2])


def test_table_free_rv_exact_for_ccm89_form():
    # CCM89 is a(x) + b(x)/R_V, so linear interpolation in 1/R_V is exact.
    wave = np.linspace(3500.0, 20000.0, 40)
    tab = ExtinctionTable("CCM89", wave, r_v_range=(2.0, 6.0), n_rv=5)
    r_v = np.array([2.0, 2.37, 3.1, 4.4, 6.0])
    got = tab.curve(r_v)
    for i, r in enumerate(r_v):
        np.testing.assert_allclose(got[i], extinction_curve("CCM89", r, wave), rtol=1e-12)


@pytest.mark.parametrize("law", ["F99", "G23"])
def test_table_free_rv_close_for_other_laws(law):
    wave = np.linspace(3500.0, 20000.0, 40)
    tab = ExtinctionTable(law, wave, r_v_range=(2.5, 5.5))
    r_v = np.array([2.61, 3.1, 3.77, 5.43])
    got = tab.curve(r_v)
    for i, r in enumerate(r_v):
        np.testing.assert_allclose(got[i], extinction_curve(law, r, wave), atol=1e-3)
    with pytest.raises(ConfigError, match="r_v|R_V"):
        tab.curve([2.4])


def test_tables_on_the_same_pixels_are_computed_once_per_process(monkeypatch):
    # common practice, no source: a batch worker fitting many stars with the same pixels
    # tabulates each curve once; other pixels or another R_V range are new tables
    from teffmc.dust import extinction

    wave = np.linspace(5000.0, 9000.0, 37)
    first = ExtinctionTable("F99", wave, r_v_range=(2.6, 5.4), n_rv=7)
    before = dict(extinction.TABLE_STATS)
    monkeypatch.setattr(extinction, "_curve", lambda *a: (_ for _ in ()).throw(
        AssertionError("computed again")))
    again = ExtinctionTable("F99", wave.copy(), r_v_range=(2.6, 5.4), n_rv=7)
    assert extinction.TABLE_STATS["hit"] == before["hit"] + 1
    np.testing.assert_array_equal(again.curve([3.1, 4.0]), first.curve([3.1, 4.0]))
    with pytest.raises(AssertionError, match="computed again"):
        ExtinctionTable("F99", wave[1:], r_v_range=(2.6, 5.4), n_rv=7)
    with pytest.raises(AssertionError, match="computed again"):
        ExtinctionTable("F99", wave, r_v_range=(2.6, 5.5), n_rv=7)
    assert extinction.TABLE_STATS["miss"] == before["miss"] + 2
