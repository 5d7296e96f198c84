"""Refractive indices of grain materials, m(lambda) = n - i k (miepython convention).

Each material is a :class:`Material` with a valid wavelength range; the registry
:data:`MATERIALS` maps the names used in configuration files to them.
"""

from dataclasses import dataclass

import numpy as np

from teffmc.dust._wave import as_wave_aa, check_range
from teffmc.errors import ConfigError

__all__ = ["MATERIALS", "ConstantIndex", "Material", "Sellmeier", "get_material"]


class Material:
    """Base class: a grain material with a refractive index m = n - i k.

    Subclasses set ``name``, ``wave_range`` [Angstrom], ``reference`` and
    implement :meth:`_nk`. ``key`` identifies the recipe in cache keys.
    """

    def _nk(self, wave_um):
        raise NotImplementedError

    @property
    def key(self):
        """A string that changes whenever the recipe changes (for caches)."""
        return repr(self)

    def refractive_index(self, wave):
        """Complex refractive index m = n - i k on given wavelengths.

        Parameters
        ----------
        wave : array_like or astropy.units.Quantity
            Vacuum wavelengths [Angstrom].

        Returns
        -------
        numpy.ndarray of complex128
            n - i k with k >= 0 (the sign convention of miepython).

        Raises
        ------
        DataError
            A wavelength outside the recipe's valid range.
        """
        wave = as_wave_aa(wave)
        check_range(wave, *self.wave_range, f"refractive index of {self.name}")
        n, k = self._nk(wave * 1e-4)
        return np.asarray(n, dtype=np.float64) - 1j * np.asarray(k, dtype=np.float64)


@dataclass(frozen=True, repr=True)
class Sellmeier(Material):
    """Three-term Sellmeier fit n^2 - 1 = sum_j B_j lambda^2 / (lambda^2 - L_j^2).

    Parameters
    ----------
    name : str
        Material name.
    b : tuple of float
        Oscillator strengths B_j (dimensionless).
    lam : tuple of float
        Resonance wavelengths L_j [micron].
    k : float
        Constant absorption index k >= 0 (a documented choice per material).
    wave_range : tuple of float
        Valid range of the fit [Angstrom].
    reference : str
        The paper of the fit.
    """

    name: str
    b: tuple
    lam: tuple
    k: float
    wave_range: tuple
    reference: str

    def _nk(self, wave_um):
        l2 = wave_um**2
        n2 = 1.0 + sum(bj * l2 / (l2 - lj**2) for bj, lj in zip(self.b, self.lam))
        return np.sqrt(n2), np.full_like(wave_um, self.k)


@dataclass(frozen=True, repr=True)
class ConstantIndex(Material):
    """A wavelength-independent refractive index m = n - i k.

    Parameters
    ----------
    n : float
        Real part (> 0).
    k : float
        Absorption index (>= 0; a negative k would mean gain).
    name : str
        Material name.
    wave_range : tuple of float
        Range where the constant is claimed to hold [Angstrom].
    reference : str
        Where the values come from.
    """

    n: float
    k: float
    name: str = "constant"
    wave_range: tuple = (1.0, 1e7)
    reference: str = "user supplied"

    def __post_init__(self):
        if not (np.isfinite(self.n) and self.n > 0):
            raise ConfigError(f"n should be > 0 but got {self.n}", key="n", value=self.n)
        if not (np.isfinite(self.k) and self.k >= 0):
            raise ConfigError(
                f"k should be >= 0 (m = n - ik convention) but got {self.k}", key="k", value=self.k
            )

    def _nk(self, wave_um):
        return np.full_like(wave_um, self.n), np.full_like(wave_um, self.k)


MATERIALS = {
    # Draine & Lee 1984, ApJ 285, 89, "astronomical silicate": n ~ 1.7, k ~ 0.03 in the
    # optical -- from memory, approximate. k rises in the UV and near 10 micron, so the
    # constant is only claimed over 0.3-2.5 micron.
    "silicate": ConstantIndex(
        1.7,
        0.03,
        name="silicate",
        wave_range=(3000.0, 25000.0),
        reference="Draine & Lee 1984 from memory, approximate",
    ),
    # Malitson & Dodge 1972, JOSA 62, 1405 (coefficients from memory): sapphire, ordinary
    # ray, 0.2-5.5 micron. k = 0: crystalline Al2O3 is transparent there; real grains may
    # absorb a little, which a size spread (smoothing the Mie ripples) matters more than.
    "corundum": Sellmeier(
        "corundum",
        (1.4313493, 0.65054713, 5.3414021),
        (0.0726631, 0.1193242, 18.028251),
        0.0,
        (2000.0, 55000.0),
        "Malitson & Dodge 1972 (Sellmeier, ordinary ray)",
    ),
    # Malitson 1965, JOSA 55, 1205 (coefficients from memory): fused silica, 0.21-3.71
    # micron. k = 0: transparent in this range.
    "silica": Sellmeier(
        "silica",
        (0.6961663, 0.4079426, 0.8974794),
        (0.0684043, 0.1162414, 9.896161),
        0.0,
        (2100.0, 37100.0),
        "Malitson 1965 (Sellmeier, fused silica)",
    ),
}


def get_material(material):
    """Return a :class:`Material` from a registry name or pass one through.

    Parameters
    ----------
    material : str or Material
        A key of :data:`MATERIALS` or a Material instance.

    Returns
    -------
    Material

    Raises
    ------
    ConfigError
        Unknown name; the message lists the allowed names.
    """
    if isinstance(material, Material):
        return material
    if material not in MATERIALS:
        raise ConfigError(
            f"unknown grain material {material!r}; allowed: {', '.join(MATERIALS)}",
            key="material",
            value=material,
        )
    return MATERIALS[material]
