"""Smeared molecular band systems (TiO, H2O, CO) and the atomic line haze.

Each opacity source is a fixed wavelength profile ("basis") times a depth-dependent
weight (number density x Boltzmann factors), so the opacity of a whole model is one
matrix product. Profiles are band-averaged ("smeared") cross-sections: no individual
rotational lines.

TiO: for each electronic system, bands (v', v'') with v'' = 0..3 and Delta v = -2..+2.
Head positions use harmonic vibrational terms, nu_head = nu_00 + w' v' - w'' v''; each
band is red-degraded: sharp head, exponential tail of width ``_W_ROT`` towards lower
wavenumber (longer wavelength), normalised to unit area. Triplet systems have three
spin sub-heads. Integrated cross-section per molecule in the lower electronic state,
(pi e^2 / m c^2) f = 8.853e-13 cm x f (classical oscillator, e.g. Gray 2005 eq. 11.11).
"""

from contextlib import contextmanager

import numpy as np

from .constants import HC_K, KB

__all__ = ["PHYSICS", "TIO_SYSTEMS", "band_basis", "band_weights", "physics"]

_C2 = HC_K * 1e-8                 # hc/k [cm K]
_PI_E2_MC2 = 8.853e-13            # pi e^2/(m_e c^2) [cm] (= pi r_e, CODATA 2018 r_e)
# Rotational spread of a TiO band [cm^-1]: P-branch lines sit at
# nu0 - (B'+B'')J - (B''-B')J^2; with <J^2> ~ kT/(hcB) at ~3000 K, B ~ 0.53 cm^-1 and
# B''-B' ~ 0.03 cm^-1 the mean offset is ~170-200 cm^-1 (our estimate, no source).
_W_ROT = 200.0
# Franck-Condon-like sequence strengths q(Delta v) (rough guess, sum ~1, from memory of
# the pattern that Delta v = 0 dominates TiO systems; not measured values)
_FC = {0: 0.55, 1: 0.18, -1: 0.18, 2: 0.045, -2: 0.045}

# TiO systems: (name, head of the (0,0) band [A, vacuum-ish], sub-head offsets [cm^-1],
# w' [cm^-1], w'' [cm^-1], electronic f (band oscillator strength), lower state).
# Band-head wavelengths: the classical heads 5167 (alpha), 5597 (beta), 6159/6187/6215
# (gamma'), 7054/7088/7126 (gamma), 8432/8442/8452 (epsilon), 8859 (delta), ~11050 (phi)
# (from memory; docs/references.md#stellar-atmospheres-and-tio). Vibrational constants and
# f-values are approximate, from memory (published f-values scatter by factors ~2).
TIO_SYSTEMS = (
    ("alpha C3D-X3D", 5167.0, (0.0, -60.0, -120.0), 838.0, 1009.0, 0.17, "X"),
    ("beta c1F-a1D", 5597.0, (0.0,), 918.0, 1018.0, 0.15, "a"),
    ("gamma' B3P-X3D", 6159.0, (0.0, -74.0, -147.0), 875.0, 1009.0, 0.14, "X"),
    ("gamma A3F-X3D", 7054.0, (0.0, -68.0, -143.0), 867.0, 1009.0, 0.11, "X"),
    ("epsilon E3P-X3D", 8432.0, (0.0, -14.0, -28.0), 850.0, 1009.0, 0.014, "X"),
    ("delta b1P-a1D", 8859.0, (0.0,), 918.0, 1018.0, 0.048, "a"),
    ("phi b1P-d1S", 11050.0, (0.0,), 918.0, 1000.0, 0.052, "d"),
)
# TiO low-lying electronic states (g, T_e [cm^-1]); same as chemistry.MOLECULES (memory)
_TIO_STATES = {"X": (6, 0.0), "a": (2, 3450.0), "d": (1, 5660.0)}
_TIO_QEL_EXTRA = ((6, 11800.0),)
_NV = 4                           # v'' = 0..3

# H2O vibrational bands: (centre [cm^-1], integrated strength [cm^-1/(molecule cm^-2)],
# Gaussian sigma [cm^-1]). Strengths: order-of-magnitude 296 K band strengths recalled
# from memory (6.3 um nu2, 2.7 um nu1/nu3, 1.9 um nu2+nu3, 1.4 um nu1+nu3, 1.1 um,
# 0.94 um); widths our rough estimate of hot (2000-3500 K) band envelopes.
_H2O = ((1595.0, 1.0e-17, 250.0), (3700.0, 1.3e-17, 300.0), (5330.0, 8.0e-19, 300.0),
        (7250.0, 5.0e-19, 350.0), (8800.0, 4.0e-20, 350.0), (10600.0, 1.0e-20, 350.0))
# CO: (2-0 style) sequences with heads; (head [cm^-1], strength, weight of hot bands)
# Fundamental 1-0 ~2143 cm^-1 S ~1e-17; first overtone head 2-0 at 2.2935 um (4360
# cm^-1) S ~8e-20; second overtone head ~1.558 um (6418 cm^-1) S ~6e-22 (from memory).
_CO = ((2200.0, 1.0e-17, 60.0), (4360.0, 8.0e-20, 90.0), (6418.0, 6.0e-22, 110.0))
_CO_HOT = 52.0                    # head shift per hot band (3-1, 4-2, ...) [cm^-1], approx.
# Atomic line haze per Fe atom (proxy for all metal lines): components
# (s [cm^2], l0 [A], L [A], chi [eV]) giving s exp(-(lambda - l0)/L) 10^(-chi (theta - 1))
# with theta = 5040/T: chi is a typical lower-level excitation energy of the lines
# (Boltzmann factor, e.g. Gray 2005 eq. 1.18), so high-excitation visible lines fade in cool
# gas while low-excitation UV lines stay. Capped at the 1500 A value. Not a published fit:
# amplitudes and shapes are calibrated on the solar U-B, B-V, V-Ks colours (our choice, see
# tests/test_synth_colours.py); the Fe II component is a rough guess (its lines lie
# further in the UV).
HAZE_I = ((1.0e-19, 4000.0, 2200.0, 2.0), (2.0e-19, 3800.0, 400.0, 0.5))
HAZE_II = ((2.0e-20, 3000.0, 600.0, 0.5),)


def _red_degraded(nu, head, width):
    d = head - nu
    return np.where(d >= 0.0, np.exp(-np.clip(d, 0, None) / width) / width, 0.0)


def band_basis(wave):
    """Return (basis (n_basis, n_wave), names)."""
    nu = 1e8 / np.asarray(wave, float)
    rows, names = [], []
    for name, head, subs, w1, w2, _f, _low in TIO_SYSTEMS:
        nu00 = 1e8 / head
        for v2 in range(_NV):
            prof = np.zeros_like(nu)
            for dv, q in _FC.items():
                v1 = v2 + dv
                if v1 < 0:
                    continue
                nuh = nu00 + w1 * v1 - w2 * v2
                for s in subs:
                    prof += q / len(subs) * _red_degraded(nu, nuh + s, _W_ROT)
            rows.append(prof)
            names.append(f"TiO {name} v''={v2}")
    h2o = sum(s / (np.sqrt(2 * np.pi) * sig) * np.exp(-0.5 * ((nu - c) / sig) ** 2)
              for c, s, sig in _H2O)
    rows.append(h2o)
    names.append("H2O")
    for v2 in range(3):          # CO hot bands v'' = 0, 1, 2
        rows.append(sum(s * _red_degraded(nu, head - _CO_HOT * v2, wid)
                        for head, s, wid in _CO))
        names.append(f"CO v''={v2}")
    lam = np.maximum(np.asarray(wave, float), 1500.0)
    for tag, comps in (("I", HAZE_I), ("II", HAZE_II)):
        for s, l0, L, _chi in comps:
            rows.append(s * np.exp(-(lam - l0) / L))
            names.append(f"haze {tag} chi={_chi:g}")
    return np.array(rows), names


#: scale factors of the most uncertain opacities, 1 = nominal. The grid's nuisance axes
#: (teffmc.photosphere.nuisance) are models rebuilt with these changed; set them only
#: through :func:`physics`.
PHYSICS = {"tio": 1.0, "haze": 1.0}


@contextmanager
def physics(tio=1.0, haze=1.0):
    """Temporarily scale the TiO band opacity and the atomic line haze."""
    old = dict(PHYSICS)
    PHYSICS.update(tio=float(tio), haze=float(haze))
    try:
        yield
    finally:
        PHYSICS.update(old)


def band_weights(T, sp, mh):
    """Return number density x population factors, shape (n_depth, n_basis) [cm^-3 x cm^..].

    The TiO columns are multiplied by ``PHYSICS["tio"]``, the haze columns by
    ``PHYSICS["haze"]``.
    """
    T = np.asarray(T, float)
    kT = KB * T
    n_tio = sp["TiO"] / kT
    qel = sum(g * np.exp(-_C2 * te / T) for g, te in list(_TIO_STATES.values())
              + list(_TIO_QEL_EXTRA))
    cols = []
    for _name, _head, _subs, _w1, w2, f, low in TIO_SYSTEMS:
        g, te = _TIO_STATES[low]
        frac = g * np.exp(-_C2 * te / T) / qel
        x = np.exp(-_C2 * w2 / T)
        for v2 in range(_NV):
            cols.append(PHYSICS["tio"] * n_tio * _PI_E2_MC2 * f * frac * (1 - x) * x**v2)
    cols.append(sp["H2O"] / kT)
    x = np.exp(-_C2 * 2143.0 / T)            # CO vibrational populations (w = 2170 approx)
    for v2 in range(3):
        cols.append(sp["CO"] / kT * (1 - x) * x**v2 * (v2 + 1))   # (v+1): band strength
    theta = 5040.0 / T
    for key, comps in (("Fe", HAZE_I), ("Fe+", HAZE_II)):
        for _s, _l0, _L, chi in comps:
            cols.append(PHYSICS["haze"] * sp[key] / kT * 10.0 ** (-chi * (theta - 1.0)))
    return np.array(cols).T
