"""Ionisation (Saha) and molecular (dissociation) equilibrium of the gas.

Species: H, H+, H-, H2, the C/O/Ti atoms and first ions, the molecules CO, OH, H2O and
TiO, and "passive" elements (He, N, Na, Mg, Al, Si, K, Ca, Fe) that only ionise once.
Second ionisation is neglected (approximation, fine below ~10^4 K for the layers that
shape the emergent flux).

Equilibrium constants follow from statistical mechanics (e.g. Gray 2005 eq. 1.20 for
Saha; Tsuji 1973, A&A 23, 411 for the molecular-equilibrium formulation): for a molecule
of N atoms,

    prod(p_atoms) / p_mol = (kT)^(N-1) (2 pi k T / h^2)^(3(N-1)/2)
                            (prod m_i / M)^(3/2) prod(U_i) / Q_mol exp(-D0 / kT)

with rigid-rotor / harmonic-oscillator molecular partition functions. Unknowns are the
logarithms of p(H), p(C), p(O), p(Ti), p(e); they are found by a damped Newton iteration
vectorised over all (T, P_gas) points.
"""

import numpy as np

from .constants import ABUND, AMU, CHI1, CHI_HMINUS, EV, HC_K, KB, MASS, SAHA_CONST, U0, U1, H

__all__ = ["MOLECULES", "PASSIVE", "Molecule", "equilibrium"]

PASSIVE = ("He", "N", "Na", "Mg", "Al", "Si", "K", "Ca", "Fe")
_ACTIVE = ("H", "C", "O", "Ti")     # index 0..3 of the unknowns; 4 is the electron


def _saha_phi(chi_ev, u0, u1, T):
    """p(ion) p(e) / p(neutral) [dyn cm^-2] (Saha equation, Gray 2005 eq. 1.20)."""
    return KB * T * SAHA_CONST * T**1.5 * 2.0 * u1 / u0 * np.exp(-chi_ev * EV / (KB * T))


class Molecule:
    """Rigid rotor + harmonic oscillator molecule.

    atoms : dict element -> count; d0 : dissociation energy into atoms [eV];
    rot : rotational constant(s) [cm^-1] (one for a linear molecule, three for a top);
    sym : symmetry number; vib : vibrational wavenumbers [cm^-1];
    elec : list of (g, T_e [cm^-1]) electronic levels.
    """

    def __init__(self, name, atoms, d0, rot, sym, vib, elec):
        self.name, self.atoms, self.d0 = name, dict(atoms), d0
        self.rot, self.sym, self.vib, self.elec = tuple(rot), sym, tuple(vib), tuple(elec)
        self.mass = sum(MASS[a] * n for a, n in self.atoms.items())

    def q_el(self, T):
        """Return the electronic partition function at temperature ``T`` [K]."""
        return sum(g * np.exp(-HC_K * 1e-8 * te / T) for g, te in self.elec)

    def partition(self, T):
        """Return the internal partition function (rotation x vibration x electronic) at T [K]."""
        c2 = HC_K * 1e-8                       # hc/k [cm K]
        if len(self.rot) == 1:                 # linear: kT / (sigma h c B)
            qrot = T / (c2 * self.rot[0] * self.sym)
        else:                                  # asymmetric top (classical limit)
            a, b, c = self.rot
            qrot = np.sqrt(np.pi) / self.sym * (T / c2) ** 1.5 / np.sqrt(a * b * c)
        qvib = 1.0
        for w in self.vib:
            qvib = qvib / (1.0 - np.exp(-c2 * w / T))
        return qrot * qvib * self.q_el(T)

    def log_kp(self, T):
        """Return ln K_p = ln of prod(p_atoms)/p_mol, pressures in dyn cm^-2."""
        n = sum(self.atoms.values())
        mprod = np.prod([(MASS[a] * AMU) ** k for a, k in self.atoms.items()])
        uprod = np.prod([U0[a] ** k for a, k in self.atoms.items()])
        kT = KB * T
        return ((n - 1) * np.log(kT) + 1.5 * (n - 1) * np.log(2 * np.pi * kT / H**2)
                + 1.5 * np.log(mprod / (self.mass * AMU)) + np.log(uprod)
                - np.log(self.partition(T)) - self.d0 * EV / kT)


# Molecular constants (all from memory; spectroscopic constants as in Huber & Herzberg
# 1979 "Constants of Diatomic Molecules"; dissociation energies D0 as quoted there and in
# docs/references.md#atomic-and-molecular-data for H2 and TiO; H2O atomisation energy
# 9.51 eV from its thermochemistry).
MOLECULES = (
    Molecule("H2", {"H": 2}, 4.478, [60.85], 2, [4401.0], [(1, 0.0)]),
    Molecule("CO", {"C": 1, "O": 1}, 11.09, [1.931], 1, [2170.0], [(1, 0.0)]),
    Molecule("OH", {"O": 1, "H": 1}, 4.392, [18.9], 1, [3738.0], [(4, 0.0)]),
    Molecule("H2O", {"H": 2, "O": 1}, 9.51, [27.88, 14.51, 9.28], 2,
             [3657.0, 1595.0, 3756.0], [(1, 0.0)]),
    # TiO: X3Delta (g=6), a1Delta ~3450 cm^-1 (g=2), d1Sigma+ ~5660 cm^-1 (g=1),
    # E3Pi ~11800 cm^-1 (g=6); term energies approximate, from memory.
    Molecule("TiO", {"Ti": 1, "O": 1}, 6.87, [0.5354], 1, [1009.0],
             [(6, 0.0), (2, 3450.0), (1, 5660.0), (6, 11800.0)]),
)
_MOL_EXP = np.array([[m.atoms.get(a, 0) for a in _ACTIVE] + [0] for m in MOLECULES], float)


def _species(u, T, abund, lk):
    """Partial pressures of all species from u = ln(pH, pC, pO, pTi, pe)."""
    p = np.exp(u)
    pH, pC, pO, pTi, pe = p
    s = {"H": pH, "C": pC, "O": pO, "Ti": pTi, "e": pe}
    s["H+"] = pH * lk["phi_H"] / pe
    s["H-"] = pH * pe / lk["phi_Hm"]
    for el in ("C", "O", "Ti"):
        s[el + "+"] = s[el] * lk["phi_" + el] / pe
    for j, m in enumerate(MOLECULES):
        s[m.name] = np.exp(sum(_MOL_EXP[j, i] * u[i] for i in range(5)) - lk["mol"][j])
    pHN = s["H"] + s["H+"] + s["H-"] + 2 * s["H2"] + s["OH"] + 2 * s["H2O"]
    s["HN"] = pHN
    pos, tot = s["H+"] + s["C+"] + s["O+"] + s["Ti+"], 0.0
    for el in PASSIVE:
        x = lk["phi_" + el] / pe
        n_tot = abund[el] * pHN
        s[el] = n_tot / (1.0 + x)
        s[el + "+"] = n_tot - s[el]
        pos = pos + s[el + "+"]
        tot = tot + n_tot
    s["pos"] = pos
    names = ["H", "H+", "H-", "C", "C+", "O", "O+", "Ti", "Ti+", "e"] + [m.name for m in MOLECULES]
    s["total"] = tot + sum(s[n] for n in names)
    return s


def _residual(u, T, P, abund, lk):
    s = _species(u, T, abund, lk)
    pCN = s["C"] + s["C+"] + s["CO"]
    pON = s["O"] + s["O+"] + s["CO"] + s["OH"] + s["H2O"] + s["TiO"]
    pTiN = s["Ti"] + s["Ti+"] + s["TiO"]
    lHN = np.log(s["HN"])
    return np.array([
        np.log(pCN) - np.log(abund["C"]) - lHN,
        np.log(pON) - np.log(abund["O"]) - lHN,
        np.log(pTiN) - np.log(abund["Ti"]) - lHN,
        np.log(s["e"] + s["H-"]) - np.log(s["pos"]),
        np.log(s["total"]) - np.log(P),
    ])


def constants_at(T):
    """Temperature-dependent equilibrium constants (dict of arrays)."""
    lk = {"phi_H": _saha_phi(CHI1["H"], U0["H"], U1["H"], T),
          # H- as the "neutral" of H: U(H-) = 1, U(H) = 2 (Gray 2005 ch. 8)
          "phi_Hm": _saha_phi(CHI_HMINUS, 1.0, U0["H"], T)}
    for el in ("C", "O", "Ti") + PASSIVE:
        lk["phi_" + el] = _saha_phi(CHI1[el], U0[el], U1[el], T)
    lk["mol"] = [m.log_kp(T) for m in MOLECULES]
    return lk


def _first_guess(T, P, abund, lk):
    """Fixed-point estimate: H/H2 from a quadratic, C, O, Ti from their balances."""
    kh2, kco, koh, kh2o, ktio = (np.exp(x) for x in lk["mol"])
    hn = P / sum(abund.values())                       # nuclei pressure if all atomic
    ph = 0.5 * (-kh2 + np.sqrt(kh2**2 + 8.0 * kh2 * hn))   # hn = ph + 2 ph^2/kh2
    pe = np.sqrt(ph * (lk["phi_H"] + sum(abund[el] * lk["phi_" + el] for el in PASSIVE)))
    pe = np.clip(pe, 1e-30 * P, 0.5 * P)
    po = abund["O"] * hn
    pc = abund["C"] * hn
    pti = abund["Ti"] * hn
    for _ in range(60):
        pc = 0.5 * pc + 0.5 * abund["C"] * hn / (1 + lk["phi_C"] / pe + po / kco)
        pti = abund["Ti"] * hn / (1 + lk["phi_Ti"] / pe + po / ktio)
        po = 0.5 * po + 0.5 * abund["O"] * hn / (1 + lk["phi_O"] / pe + pc / kco + ph / koh
                                                   + ph**2 / kh2o + pti / ktio)
    return np.log(np.maximum(np.array([ph, pc, po, pti, pe]), 1e-300))


def equilibrium(T, P, mh=0.0, u0=None, tol=1e-9, maxiter=80):
    """Solve the gas equilibrium at temperatures T [K] and gas pressures P [dyn cm^-2].

    Returns (species dict of partial pressures, u) where u can warm-start the next call.
    Metals (everything but H and He) are scaled by 10**mh.
    """
    with np.errstate(all="ignore"):     # underflow of trace species is harmless
        return _equilibrium(T, P, mh, u0, tol, maxiter)


def _equilibrium(T, P, mh, u0, tol, maxiter):
    T = np.atleast_1d(np.asarray(T, float))
    P = np.broadcast_to(np.asarray(P, float), T.shape).copy()
    abund = {el: ABUND[el] * (1.0 if el in ("H", "He") else 10.0 ** mh) for el in ABUND}
    lk = constants_at(T)
    if u0 is None:
        u = _first_guess(T, P, abund, lk)
    else:
        u = np.array(u0, float).copy()
    for _ in range(maxiter):
        r = _residual(u, T, P, abund, lk)
        jac = np.empty((T.size, 5, 5))
        h = 1e-6
        for j in range(5):
            du = u.copy()
            du[j] += h
            jac[:, :, j] = ((_residual(du, T, P, abund, lk) - r) / h).T
        jac += 1e-12 * np.eye(5)        # guards against exactly singular rows
        step = np.linalg.solve(jac, -r.T[:, :, None])[:, :, 0].T
        step = np.clip(step, -3.0, 3.0)
        fac = 1.0
        u = u + fac * step
        if np.max(np.abs(fac * step)) < tol:
            break
    return _species(u, T, abund, lk), u
