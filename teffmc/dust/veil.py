"""The circumstellar dust veil: partial covering by Mie (or grey) dust with forward scattering.

Derivation (the model :meth:`Veil.factor` evaluates)
----------------------------------------------------
A fraction ``c = veil_cover`` of the stellar disc lies behind a dust screen of optical
depth tau(lambda) = veil_tau Q_ext(lambda, a) / Q_ext(0.55 micron, a); the rest of the
disc is seen directly. The star is unresolved, so the observer receives the sum::

    F_obs = F_phot [(1 - c) + c T(lambda)] = F_phot [1 - c (1 - T)].

Inside the screen, each extinction event removes a photon from the beam. With
probability omega (single-scattering albedo, Q_sca / Q_ext) it is scattered rather
than absorbed. Which scattered photons reach the observer depends on where the screen
is. Starlight scattered by a screen element at projected distance r from the line of
sight, the screen lying a distance d from the star, reaches us after turning through
theta ~ atan(r / d); for an unresolved star, optically thin screen the light returned
per photon removed from the disc's beam is therefore omega P(theta_c), with P(theta_c)
the fraction of the phase function within the half-angle theta_c = atan(R_screen / d)
that the screen subtends at the star (``scatter_cone_deg``). A screen hugging the
photosphere has theta_c -> 90 degrees: its whole forward hemisphere reaches us. A
compact screen further out (theta_c of a few degrees) returns only the forward
diffraction lobe, which is narrower and taller at short wavelengths (width ~ 1/x), so
it returns relatively more blue light. A fraction ``s = veil_scatter`` in [0, 1] of
that light still reaches the observer (holes, clumping, the part of the screen off the
line of sight that is not illuminated). A photon returned to the beam keeps travelling
outwards through the rest of the screen and meets the same odds again, i.e. it is
treated as undeviated -- the small-angle (similarity, delta-scaling) approximation for
forward-peaked phase functions (Joseph, Wiscombe & Weinman 1976, J. Atmos. Sci. 33,
2452; from memory). The beam then obeys dI / dtau = -(1 - s omega P) I, so::

    T(lambda) = exp(-tau(lambda) [1 - s omega(lambda) P(lambda)]).

To first order in tau this equals the single-scattering sum
exp(-tau) + s omega P (1 - exp(-tau)); unlike that sum it does not keep a floor
s omega P for an opaque screen. For theta_c = 90 degrees P is the forward-hemisphere
fraction of the Henyey & Greenstein 1941 (ApJ 93, 70) phase function with the Mie
asymmetry g::

    F(g) = (1 + g) / (2 g) [1 - (1 - g) / sqrt(1 + g^2)],   F(0) = 1/2, F(1) = 1,

which is steeper in g than the two-stream value (1 + g) / 2 (F ~ 1/2 + 3g/4) and agrees
with the Mie phase function's hemisphere fraction to ~0.02 for silicate grains of
0.3-1 micron (measured). For narrower cones Henyey-Greenstein misses the diffraction
peak, so P(theta_c) is integrated from the Mie phase function
(:func:`teffmc.dust.mie.cone_fraction`) and size-averaged with Q_sca weights.

Colour of the returned light (measured, silicate, 0.1 dex spread, tests/test_dust_veil.py):
with the hemisphere, grains of 0.3-1 micron return relatively *redder* light, because
their scattering optical depth is larger at 0.8 than at 0.4 micron (the first Mie
extinction peak) and the albedo is lower in the blue; only grains <~ 0.2 micron return
bluer light. With a compact screen (theta_c <~ 15 degrees) the diffraction lobe wins and
0.3-1 micron grains return bluer light too.

Assumptions: single spheres (Mie) of one material; thermal emission of the dust
neglected (cool dust emits little below ~1 micron); no change of wavelength on
scattering; light scattered outside the cone is lost (it returns to the star or leaves
sideways); single scattering sets the cone (multiple scattering is in the similarity
approximation above).
A grey veil has tau independent of wavelength and no scattering term (a constant
scattering gain would only rescale ``veil_tau``).
"""

import numpy as np
from scipy.sparse import csr_matrix

from teffmc.dust._wave import as_wave_aa
from teffmc.dust.mietable import RADIUS_RANGE, MieTable, interp_log_radius, log_radius
from teffmc.errors import ConfigError

__all__ = ["VEIL_KINDS", "V_WAVE", "Veil", "forward_fraction"]

VEIL_KINDS = ("mie", "grey")
#: Reference wavelength of veil_tau [Angstrom, vacuum] (0.55 micron, Johnson V; common
#: practice, no source).
V_WAVE = 5500.0


def forward_fraction(g):
    """Fraction of light scattered into the forward hemisphere, Henyey-Greenstein.

    Parameters
    ----------
    g : array_like
        Asymmetry parameter <cos theta>, in [-1, 1].

    Returns
    -------
    numpy.ndarray
        F(g) = int_0^1 p_HG(mu) dmu with p_HG normalised on [-1, 1].

    Notes
    -----
    Henyey & Greenstein 1941, ApJ 93, 70 (from memory). The series
    1/2 + 3g/4 - 7g^3/16 is used for |g| < 1e-3 to avoid the 0/0.
    """
    g = np.asarray(g, dtype=np.float64)
    small = np.abs(g) < 1e-3
    gs = np.where(small, 1.0, g)
    exact = (1.0 + gs) / (2.0 * gs) * (1.0 - (1.0 - gs) / np.sqrt(1.0 + gs * gs))
    return np.where(small, 0.5 + 0.75 * g - 0.4375 * g**3, exact)


def _batch(value, name, lo, hi):
    v = np.atleast_1d(np.asarray(value, dtype=np.float64))
    bad = ~(np.isfinite(v) & (v >= lo) & (v <= hi))
    if bad.any():
        raise ConfigError(f"{name} should be in [{lo:g}, {hi:g}] but got {v[bad][0]:g}",
                          key=name, value=float(v[bad][0]))
    return v


class Veil:
    """Multiplicative factor of a partial circumstellar dust veil on a set of pixels.

    Parameters
    ----------
    kind : {"mie", "grey"}
        Mie grains (tau and scattering from a :class:`MieTable`) or grey dust.
    wave : array_like or astropy.units.Quantity
        Vacuum wavelengths [Angstrom] of the pixels.
    material : str or Material
        Grain material (Mie only).
    spread_dex : float
        Log-normal width of the grain sizes [dex] (Mie only); the default 0.1
        averages out the Mie ripples.
    scattering : bool, optional
        Return forward-scattered light to the beam (Mie only; default True for Mie).
    scatter_cone_deg : float
        Half-angle theta_c [degree] of the cone of scattering angles whose light
        reaches the observer (see the module docstring): 90 (default) for a screen
        hugging the photosphere, uses the Henyey-Greenstein hemisphere fraction F(g);
        smaller values, for a compact screen further out, use the Mie phase function
        tabulated by :class:`MieTable` (slower to tabulate once, cached).
    radius_range : tuple of float
        Tabulated grain radii [micron] (Mie only).
    n_radius : int, optional
        Number of tabulated radii (see :class:`MieTable`).
    use_cache : bool
        Use the on-disk Mie table cache.

    Notes
    -----
    The model and its derivation are in the module docstring
    (:mod:`teffmc.dust.veil`). Mie theory: Bohren & Huffman 1983.
    """

    def __init__(self, kind, wave, material="silicate", spread_dex=0.1, scattering=None,
                 radius_range=RADIUS_RANGE, n_radius=None, use_cache=True,
                 scatter_cone_deg=90.0):
        if kind not in VEIL_KINDS:
            raise ConfigError(f"unknown veil kind {kind!r}; allowed: {', '.join(VEIL_KINDS)}",
                              key="veil", value=kind)
        self.kind = kind
        self.wave = as_wave_aa(wave)
        if kind == "grey":
            if scattering:
                raise ConfigError("a grey veil has no scattering term; set scattering = false",
                                  key="scattering", value=scattering)
            self.scattering = False
            return
        self.scattering = True if scattering is None else bool(scattering)
        cone = float(scatter_cone_deg)
        if not (np.isfinite(cone) and 0.0 < cone <= 90.0):
            raise ConfigError(f"scatter_cone_deg should be in (0, 90] but got {cone}",
                              key="scatter_cone_deg", value=scatter_cone_deg)
        self.scatter_cone_deg = cone
        wave_all = np.union1d(self.wave, [V_WAVE])
        pix = np.searchsorted(wave_all, self.wave)
        ref = int(np.searchsorted(wave_all, V_WAVE))
        narrow = self.scattering and cone < 90.0
        table = MieTable(material, wave_all, spread_dex, radius_range, n_radius, use_cache,
                         cone_deg=cone if narrow else None)
        self.table = table
        self._ln_r = np.log(table.radius)
        q = table.table_q_ext
        q_rel = q[:, pix] / q[:, ref:ref + 1]
        if narrow:        # omega P(theta_c) = <Q_sca P> / <Q_ext>
            returned = table.table_q_cone[:, pix] / q[:, pix]
        else:             # omega F(g), Henyey-Greenstein forward hemisphere
            returned = table.table_q_sca[:, pix] / q[:, pix] * forward_fraction(
                table.table_g[:, pix])
        # rows [tau/veil_tau; tau omega P / veil_tau] per radius: the effective optical
        # depth tau (1 - s omega P) of a batch is one sparse combination of these rows
        self._rows = np.ascontiguousarray(np.vstack([q_rel, q_rel * returned]))

    def optical_depth(self, veil_tau, grain_radius=None):
        """Veil optical depth tau(lambda) on the pixels, shape (n, n_pix).

        Parameters
        ----------
        veil_tau : array_like, shape (n,)
            Optical depth at 0.55 micron (>= 0).
        grain_radius : array_like, shape (n,), optional
            Grain radius [micron] (Mie only).

        Returns
        -------
        numpy.ndarray, shape (n, n_pix)
        """
        tau = _batch(veil_tau, "veil_tau", 0.0, np.inf)
        if self.kind == "grey":
            return np.repeat(tau[:, None], self.wave.size, axis=1)
        q_rel = self._rows[:self._ln_r.size]           # tau / veil_tau per radius
        return tau[:, None] * interp_log_radius(self._ln_r, q_rel, grain_radius)

    def factor(self, veil_tau, veil_cover, grain_radius=None, veil_scatter=None):
        """Multiplicative factor applied to the photospheric flux.

        Parameters
        ----------
        veil_tau : array_like, shape (n,)
            Optical depth of the veil at 0.55 micron (>= 0).
        veil_cover : array_like, shape (n,)
            Covered fraction of the stellar disc, in [0, 1].
        grain_radius : array_like, shape (n,), optional
            Grain radius [micron], inside the table's range (Mie only).
        veil_scatter : array_like, shape (n,), optional
            Geometry factor s in [0, 1] of the scattered light (Mie with scattering).

        Returns
        -------
        numpy.ndarray, shape (n, n_pix)
            1 - c (1 - T) with T = exp(-tau [1 - s omega F(g)]); exactly 1.0 where
            veil_tau = 0 or veil_cover = 0.

        Raises
        ------
        ConfigError
            A parameter outside its range, or one the model needs is missing.
        """
        tau = _batch(veil_tau, "veil_tau", 0.0, np.inf)
        cover = _batch(veil_cover, "veil_cover", 0.0, 1.0)[:, None]
        if self.kind == "grey":
            return 1.0 - cover * (1.0 - np.exp(-tau))[:, None] * np.ones(self.wave.size)
        if grain_radius is None:
            raise ConfigError("a Mie veil needs grain_radius", key="grain_radius")
        if self.scattering and veil_scatter is None:
            raise ConfigError("a scattering veil needs veil_scatter", key="veil_scatter")
        # tau_eff = veil_tau [A(r) - s B(r)], A and B linear in ln r between table rows:
        # one sparse (n x 2 n_radius) weight matrix times the row table (4 rows per walker)
        t = log_radius(self._ln_r, grain_radius)
        nr = self._ln_r.size
        i = np.clip(np.searchsorted(self._ln_r, t, side="right") - 1, 0, nr - 2)
        w = (t - self._ln_r[i]) / (self._ln_r[i + 1] - self._ln_r[i])
        coef = [tau * (1.0 - w), tau * w]
        cols = [i, i + 1]
        if self.scattering:
            s = _batch(veil_scatter, "veil_scatter", 0.0, 1.0)
            coef += [-s * coef[0], -s * coef[1]]
            cols += [nr + i, nr + i + 1]
        n, k = tau.size, len(cols)
        weights = csr_matrix((np.stack(coef, axis=1).ravel(), np.stack(cols, axis=1).ravel(),
                              np.arange(0, k * n + 1, k)), shape=(n, 2 * nr))
        f = np.asarray(weights @ self._rows)
        f *= -1.0
        np.exp(f, out=f)
        f -= 1.0
        f *= cover
        f += 1.0  # 1 - c (1 - T); exactly 1 when tau or c is 0
        return f
