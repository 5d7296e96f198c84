"""Physical constants shared by the numerical core, taken from astropy.constants (CODATA).

One definition each, so that photosphere, observe and likelihood cannot disagree.
"""

from astropy import constants as _c

__all__ = ["C_KMS", "C_A_PER_S", "C_CGS", "H_CGS", "K_CGS"]

C_KMS = float(_c.c.to_value("km/s"))          #: speed of light [km/s] (299792.458, exact)
C_A_PER_S = float(_c.c.to_value("Angstrom/s"))  #: speed of light [Angstrom/s]

# exact since the 2019 SI redefinition (CODATA 2018 onwards), in cgs
C_CGS = float(_c.c.cgs.value)      #: speed of light [cm/s]
H_CGS = float(_c.h.cgs.value)      #: Planck constant [erg s]
K_CGS = float(_c.k_B.cgs.value)    #: Boltzmann constant [erg/K]
