"""Unit checks of the synthesis ingredients (chemistry, opacity, transfer, validation)."""

import numpy as np
import pytest

from teffmc.errors import GridError
from teffmc.photosphere.synth import model_atmosphere, surface_flux
from teffmc.photosphere.synth.chemistry import equilibrium
from teffmc.photosphere.synth.constants import ABUND, SIGMA
from teffmc.photosphere.synth.opacity import Opacity
from teffmc.photosphere.synth.radiation import emergent_flux, moments, planck


def test_equilibrium_conserves_nuclei_charge_and_pressure():
    # definitions (Dalton's law, charge neutrality, element conservation): exact to 1e-6
    T = np.array([1500.0, 2500.0, 3600.0, 5772.0, 9000.0, 20000.0])
    P = np.array([1e2, 1e5, 1e3, 1e5, 1e4, 1e5])
    mh = 0.3
    sp, _ = equilibrium(T, P, mh)
    checks = {
        "total": sp["total"] / P,
        "charge": (sp["e"] + sp["H-"]) / sp["pos"],
        "O/H": (sp["O"] + sp["O+"] + sp["CO"] + sp["OH"] + sp["H2O"] + sp["TiO"])
        / sp["HN"] / (ABUND["O"] * 10**mh),
        "Ti/H": (sp["Ti"] + sp["Ti+"] + sp["TiO"]) / sp["HN"] / (ABUND["Ti"] * 10**mh),
    }
    for name, v in checks.items():
        if np.max(np.abs(v - 1.0)) > 1e-6:
            pytest.fail(f"{name} ratio should be 1 but got {v}")


def test_molecules_switch_on_in_cool_gas():
    # common practice, no source: H2 and TiO negligible in hot gas, important in cool gas
    sp, _ = equilibrium(np.array([2000.0, 6000.0]), np.array([1e4, 1e4]))
    h2 = 2 * sp["H2"] / sp["HN"]
    if not (h2[0] > 0.5 and h2[1] < 1e-2):
        pytest.fail(f"fraction of H in H2 at 2000/6000 K: {h2}")
    tio = sp["TiO"] / (sp["Ti"] + sp["Ti+"] + sp["TiO"])
    if not (tio[0] > 0.5 and tio[1] < 1e-3):
        pytest.fail(f"fraction of Ti in TiO at 2000/6000 K: {tio}")


def test_hminus_bound_free_peak():
    # Gray 2005 Fig. 8.3 (from memory): H- bf cross-section peaks near 8500 A at ~4e-17 cm^2
    # and vanishes beyond the 16421 A photo-detachment threshold
    w = np.linspace(3000.0, 20000.0, 3401)
    a = Opacity(w).hm_bf
    wp = w[np.argmax(a)]
    if not (7500.0 < wp < 9500.0 and 3.5e-17 < a.max() < 5.0e-17):
        pytest.fail(f"H- bf peak {a.max():.3g} cm^2 at {wp:.0f} A")
    if np.any(a[w > 16421.0] != 0.0):
        pytest.fail("H- bf opacity beyond the threshold")


def test_transfer_of_a_linear_source_function():
    # Eddington-Barbier is exact for S = a + b tau: F = pi (a + 2b/3), H = b/3 at depth
    # (Mihalas 1978 sec. 2-2, from memory)
    tau = np.logspace(-6, 3, 120)[:, None] * np.ones((1, 3))
    a, b = 2.0, 3.0
    S = a + b * tau
    F = emergent_flux(tau, S)
    if np.max(np.abs(F / (np.pi * (a + 2 * b / 3)) - 1)) > 1e-6:
        pytest.fail(f"emergent flux {F} vs {np.pi * (a + 2 * b / 3)}")
    _J, H = moments(tau, S)
    deep = tau[:, 0] > 10
    if np.max(np.abs(H[deep] / (b / 3) - 1)) > 1e-3:
        pytest.fail("deep flux of a linear source should be b/3")


def test_planck_integrates_to_sigma_t4():
    # Stefan-Boltzmann law (CODATA 2018 sigma)
    w = np.logspace(2, 7, 20000)
    bb = np.pi * planck(w, np.array([5000.0]))[0]
    tot = np.sum(0.5 * (bb[1:] + bb[:-1]) * np.diff(w))
    if abs(tot / (SIGMA * 5000.0**4) - 1) > 1e-4:
        pytest.fail(f"pi int B = {tot:.6g}, sigma T^4 = {SIGMA * 5000.0**4:.6g}")


def test_model_atmosphere_structure():
    # solar model: T at tau_R = 1 near 6400 K, monotonic P, temperature minimum above
    # (common practice, no source; the grey Eddington value at tau=1 is 1.15 Teff)
    atm = model_atmosphere(5772.0, 4.438, 0.0)
    t1 = np.interp(0.0, atm.logtau, atm.T)
    if not 5900.0 < t1 < 7000.0:
        pytest.fail(f"T(tau_R=1) of the solar model should be ~6400 K but got {t1:.0f}")
    if not np.all(np.diff(atm.P) > 0):
        pytest.fail("gas pressure should increase inwards")
    if not 3500.0 < atm.T[0] < 5000.0:
        pytest.fail(f"surface temperature {atm.T[0]:.0f} K")


@pytest.mark.parametrize("args", [(1000.0, 0.0, 0.0), (3600.0, 9.0, 0.0),
                                  (3600.0, 0.0, np.nan)])
def test_out_of_range_parameters_raise(args):
    with pytest.raises(GridError):
        model_atmosphere(*args)


def test_bad_wavelengths_raise():
    with pytest.raises(GridError):
        surface_flux(5000.0, 4.0, 0.0, np.array([5000.0, 4000.0]))
