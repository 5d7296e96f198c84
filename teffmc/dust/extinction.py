"""Interstellar extinction curves A_lambda / A_V from ``dust_extinction``.

The laws are looked up by name in :data:`LAWS`. ``dust_extinction`` reads a
unitless array as wavenumbers in 1/micron, so every call here passes an
explicit ``astropy`` Quantity in 1/micron computed from vacuum Angstrom.
"""

import hashlib
from collections import OrderedDict

import numpy as np

from teffmc.dust._interp import RowInterpolator
from teffmc.dust._wave import as_wave_aa, check_range
from teffmc.errors import ConfigError

__all__ = ["LAWS", "ExtinctionTable", "extinction_curve", "TABLE_STATS"]

#: tables served from the per-process memo ("hit") or computed ("miss"): a process
#: fitting many stars with the same pixels (a ``teffmc batch`` worker) computes each once
TABLE_STATS = {"hit": 0, "miss": 0}
_TABLES = OrderedDict()
_TABLES_SIZE = 64


def _memo_table(key, compute):
    if key in _TABLES:
        TABLE_STATS["hit"] += 1
        _TABLES.move_to_end(key)
        return _TABLES[key]
    TABLE_STATS["miss"] += 1
    table = compute()
    table.flags.writeable = False  # shared by every star of the process
    _TABLES[key] = table
    while len(_TABLES) > _TABLES_SIZE:
        _TABLES.popitem(last=False)
    return table

#: name -> (``dust_extinction.parameter_averages`` class, paper). All take R_V.
#: Paper citations from memory.
LAWS = {
    "CCM89": ("CCM89", "Cardelli, Clayton & Mathis 1989, ApJ 345, 245"),
    "O94": ("O94", "O'Donnell 1994, ApJ 422, 158"),
    "F99": ("F99", "Fitzpatrick 1999, PASP 111, 63"),
    "F04": ("F04", "Fitzpatrick 2004, ASP Conf. Ser. 309, 33"),
    "F19": ("F19", "Fitzpatrick et al. 2019, ApJ 886, 108"),
    "G23": ("G23", "Gordon et al. 2023, ApJ 950, 86"),
}


def _law_class(law):
    if law not in LAWS:
        raise ConfigError(
            f"unknown extinction law {law!r}; allowed: {', '.join(LAWS)}", key="law", value=law
        )
    from dust_extinction import parameter_averages

    return getattr(parameter_averages, LAWS[law][0])


def law_ranges(law):
    """Return the valid wavelength range [Angstrom] and R_V range of an extinction law.

    Parameters
    ----------
    law : str
        A key of :data:`LAWS`.

    Returns
    -------
    wave_range : tuple of float
        (shortest, longest) valid wavelength [Angstrom].
    r_v_range : tuple of float
        (lowest, highest) valid R_V.
    """
    cls = _law_class(law)
    x_lo, x_hi = cls.x_range  # [1/micron]
    return (1e4 / x_hi, 1e4 / x_lo), tuple(float(v) for v in cls.Rv_range)


def _check_r_v(law, r_v, r_v_range):
    r_v = np.asarray(r_v, dtype=np.float64)
    lo, hi = r_v_range
    bad = ~np.isfinite(r_v) | (r_v < lo) | (r_v > hi)
    if bad.any():
        raise ConfigError(
            f"R_V of law {law} should be in [{lo:g}, {hi:g}] but got {r_v[bad].flat[0]:g}",
            key="r_v",
            value=float(r_v[bad].flat[0]),
        )


def _curve(law, r_v, wave_aa):
    import astropy.units as u

    cls = _law_class(law)
    wave_range, r_v_range = law_ranges(law)
    check_range(wave_aa, *wave_range, f"extinction law {law}")
    _check_r_v(law, r_v, r_v_range)
    inv_micron = 1e4 / wave_aa  # [1/micron]
    return np.asarray(cls(Rv=float(r_v))(inv_micron / u.micron), dtype=np.float64)


def extinction_curve(law, r_v=3.1, wave=None):
    """Extinction curve A_lambda / A_V of a named law on given wavelengths.

    Parameters
    ----------
    law : str
        One of :data:`LAWS` ("CCM89", "O94", "F99", "F04", "F19", "G23").
    r_v : float
        Total-to-selective extinction ratio R_V = A_V / E(B-V).
    wave : array_like or astropy.units.Quantity
        Vacuum wavelengths [Angstrom] (plain numbers) or a Quantity of length.

    Returns
    -------
    numpy.ndarray
        A_lambda / A_V, same length as ``wave``.

    Raises
    ------
    ConfigError
        Unknown law (the message lists the allowed names) or R_V outside the
        law's range.
    DataError
        A wavelength outside the law's valid range (no extrapolation).

    Notes
    -----
    Curves from ``dust_extinction`` (Gordon 2024, JOSS 9, 7023, from memory);
    the papers of the laws are listed in :data:`LAWS`.
    """
    if wave is None:
        raise ConfigError("extinction_curve needs wavelengths", key="wave")
    return _curve(law, r_v, as_wave_aa(wave))


class ExtinctionTable:
    """A_lambda / A_V precomputed on a dataset's pixels, for a batch of R_V.

    Parameters
    ----------
    law : str
        One of :data:`LAWS`.
    wave : array_like or astropy.units.Quantity
        Vacuum wavelengths [Angstrom] of the pixels.
    r_v : float, optional
        Fixed R_V (default 3.1). Ignored when ``r_v_range`` is given.
    r_v_range : tuple of float, optional
        (low, high) when R_V is a free parameter; the curve is tabulated on
        ``n_rv`` nodes uniform in 1/R_V and interpolated linearly in 1/R_V.
    n_rv : int
        Number of R_V nodes (free R_V only).

    Notes
    -----
    Interpolating in 1/R_V is exact for laws of the form a(x) + b(x)/R_V
    (CCM89, O94) and accurate to ~1e-4 for the others with the default nodes.
    """

    def __init__(self, law, wave, r_v=3.1, r_v_range=None, n_rv=41):
        self.law = law
        self.wave = as_wave_aa(wave)
        pixels = hashlib.sha256(np.ascontiguousarray(self.wave).tobytes()).hexdigest()
        if r_v_range is None:
            self.r_v = float(r_v)
            self.r_v_range = None
            self._table = _memo_table((law, self.r_v, pixels),
                                      lambda: _curve(law, self.r_v, self.wave)[None, :])
            return
        lo, hi = (float(v) for v in r_v_range)
        if not lo < hi:
            raise ConfigError(f"r_v_range should be (low, high) but got {r_v_range}", key="r_v")
        if int(n_rv) < 2:
            raise ConfigError(f"n_rv should be >= 2 but got {n_rv}", key="n_rv")
        self.r_v, self.r_v_range = None, (lo, hi)
        self._inv_nodes = np.linspace(1.0 / hi, 1.0 / lo, int(n_rv))  # ascending
        self._table = _memo_table(
            (law, lo, hi, int(n_rv), pixels),
            lambda: np.stack([_curve(law, 1.0 / s, self.wave) for s in self._inv_nodes]))
        self._interp = RowInterpolator(self._inv_nodes, self._table)

    def curve(self, r_v):
        """A_lambda / A_V for a batch of R_V.

        Parameters
        ----------
        r_v : array_like, shape (n,)
            R_V per walker. With a fixed-R_V table every value must equal it.

        Returns
        -------
        numpy.ndarray, shape (n, n_pix)
            A fixed-R_V table returns a read-only broadcast view.

        Raises
        ------
        ConfigError
            R_V outside the tabulated range (or not the fixed value).
        """
        r_v = np.atleast_1d(np.asarray(r_v, dtype=np.float64))
        if self.r_v_range is None:
            if np.any(r_v != self.r_v):
                bad = r_v[r_v != self.r_v][0]
                raise ConfigError(
                    f"this table has R_V fixed at {self.r_v:g} but got {bad:g}", key="r_v"
                )
            return np.broadcast_to(self._table, (r_v.size, self.wave.size))
        _check_r_v(self.law, r_v, self.r_v_range)
        return self._interp(1.0 / r_v)
