"""Physical constants, abundances and atomic/molecular data of the synthesis.

Units are cgs throughout (erg, cm, g, s, K, dyn cm^-2); wavelengths in Angstrom.
Every number says where it comes from; "from memory" means recalled, not read
from the source at the time of writing, and is approximate.
"""

import numpy as np

from ...constants import C_CGS, H_CGS, K_CGS

__all__ = [
    "ABUND",
    "AMU",
    "CHI1",
    "ELEMENTS",
    "EV",
    "KB",
    "MASS",
    "ME",
    "SAHA_CONST",
    "SIGMA",
    "U0",
    "U1",
    "C",
    "H",
]

# h, c, k: exact SI-defined values in cgs, from the package's one definition
# (teffmc.constants, astropy.constants); the rest CODATA 2018.
H = H_CGS                   # Planck constant [erg s]
C = C_CGS                   # speed of light [cm s^-1]
KB = K_CGS                  # Boltzmann constant [erg K^-1]
EV = 1.602176634e-12        # electron volt [erg]
ME = 9.1093837015e-28       # electron mass [g]  (CODATA 2018)
AMU = 1.66053906660e-24     # atomic mass unit [g]  (CODATA 2018)
SIGMA = 5.670374419e-5      # Stefan-Boltzmann [erg cm^-2 s^-1 K^-4] (CODATA 2018)
E_ESU = 4.80320471e-10      # elementary charge [esu] (CODATA 2018)
SIGMA_T = 6.6524587e-25     # Thomson cross-section [cm^2] (CODATA 2018)
HC_K = H * C / KB * 1e8     # hc/k in [Angstrom K] (= 1.4388e8)

# (2 pi m_e k / h^2)^(3/2) [cm^-3 K^-3/2]: Saha equation constant (e.g. Gray 2005 eq. 1.20)
SAHA_CONST = (2.0 * np.pi * ME * KB / H**2) ** 1.5

ELEMENTS = ("H", "He", "C", "N", "O", "Na", "Mg", "Al", "Si", "K", "Ca", "Ti", "Fe")

# Solar photospheric abundances log eps (H = 12): Asplund, Grevesse, Sauval & Scott 2009,
# ARA&A 47, 481, Table 1 (values from memory).
_LOG_EPS = {
    "H": 12.00, "He": 10.93, "C": 8.43, "N": 7.83, "O": 8.69, "Na": 6.24, "Mg": 7.60,
    "Al": 6.45, "Si": 7.51, "K": 5.03, "Ca": 6.34, "Ti": 4.95, "Fe": 7.50,
}
ABUND = {el: 10.0 ** (v - 12.0) for el, v in _LOG_EPS.items()}   # number ratio to H

# Standard atomic weights (IUPAC, from memory; 4 significant digits suffice here).
MASS = {
    "H": 1.008, "He": 4.0026, "C": 12.011, "N": 14.007, "O": 15.999, "Na": 22.990,
    "Mg": 24.305, "Al": 26.982, "Si": 28.085, "K": 39.098, "Ca": 40.078, "Ti": 47.867,
    "Fe": 55.845,
}

# First ionisation potentials [eV] (NIST Atomic Spectra Database values, from memory).
CHI1 = {
    "H": 13.598, "He": 24.587, "C": 11.260, "N": 14.534, "O": 13.618, "Na": 5.139,
    "Mg": 7.646, "Al": 5.986, "Si": 8.152, "K": 4.341, "Ca": 6.113, "Ti": 6.828,
    "Fe": 7.902,
}

# Partition functions of neutral atoms (U0) and first ions (U1), held constant at their
# approximate values for 4000-6000 K. From memory of the tabulations in Gray 2005
# ("The Observation and Analysis of Stellar Photospheres", 3rd ed., Appendix D) and of
# Irwin 1981 (ApJS 45, 621). Approximation: no temperature dependence.
U0 = {
    "H": 2.0, "He": 1.0, "C": 9.3, "N": 4.1, "O": 8.8, "Na": 2.2, "Mg": 1.0, "Al": 5.8,
    "Si": 9.5, "K": 2.3, "Ca": 1.3, "Ti": 30.0, "Fe": 27.0,
}
U1 = {
    "H": 1.0, "He": 2.0, "C": 5.9, "N": 9.0, "O": 4.0, "Na": 1.0, "Mg": 2.0, "Al": 1.0,
    "Si": 5.7, "K": 1.0, "Ca": 2.3, "Ti": 55.0, "Fe": 42.0,
}

# H- : electron affinity of H 0.754 eV (from memory; e.g. Gray 2005 ch. 8;
# docs/references.md#atomic-and-molecular-data).
CHI_HMINUS = 0.754
