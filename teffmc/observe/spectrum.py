"""Observed 1-D spectra: the container, file reading, validation and masks.

Inside teffmc a spectrum is on a vacuum wavelength axis [Angstrom, ascending]
with F_lambda [erg s^-1 cm^-2 A^-1]. Readers convert air wavelengths (Morton
2000, see :mod:`teffmc.observe.airvac`) and any flux-density unit on entry.
F_lambda per air Angstrom is taken as per vacuum Angstrom: the two differ by
the factor n(air) ~ 1.0003, far below flux-calibration accuracy and absorbed
by the calibration polynomial.
"""

from dataclasses import dataclass, field, replace

import numpy as np

from teffmc.errors import DataError
from teffmc.observe._readers import read_raw
from teffmc.observe._units import flux_to_flam, wave_to_A
from teffmc.observe.airvac import air_to_vacuum

__all__ = ["TELLURIC_BANDS", "Spectrum", "apply_masks", "from_specutils", "read_spectrum"]

# Telluric absorption bands [A] (common practice, no source;
# docs/references.md#spectra-and-wavelengths):
# O2 B, H2O, O2 A, H2O, H2O. Their edges are approximate; the ~2 A air/vacuum
# difference is below their precision.
TELLURIC_BANDS = (
    (6860.0, 6950.0),
    (7160.0, 7340.0),
    (7590.0, 7700.0),
    (8120.0, 8350.0),
    (8950.0, 9800.0),
)


def _readonly(values, dtype):
    arr = np.array(values, dtype=dtype)
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True)
class Spectrum:
    """A validated 1-D spectrum.

    Attributes
    ----------
    wave : ndarray
        Vacuum wavelength [Angstrom], strictly increasing.
    flux : ndarray
        F_lambda [erg s^-1 cm^-2 A^-1]; may be non-finite where ``mask`` is False.
    err : ndarray
        1-sigma error of ``flux`` [same unit]; > 0 where ``mask`` is True.
    mask : ndarray of bool
        True = use the pixel.
    name : str
        A label (the file stem by default).
    source : str or None
        The file it was read from.
    """

    wave: np.ndarray
    flux: np.ndarray
    err: np.ndarray
    mask: np.ndarray
    name: str = "spectrum"
    source: str | None = field(default=None)

    @property
    def n_used(self):
        """Number of pixels with ``mask`` True."""
        return int(np.count_nonzero(self.mask))

    def used(self):
        """Return a copy holding only the pixels to use."""
        m = self.mask
        return replace(
            self,
            wave=_readonly(self.wave[m], float),
            flux=_readonly(self.flux[m], float),
            err=_readonly(self.err[m], float),
            mask=_readonly(self.mask[m], bool),
        )


def make_spectrum(wave_A, flux, err, use=None, *, name="spectrum", source=None, names=None):
    """Validate arrays already in core units and build a :class:`Spectrum`.

    Pixels whose flux or error is not finite are masked. Raises
    :class:`~teffmc.errors.DataError` (naming file and column) for mismatched
    lengths, non-finite or non-increasing wavelengths, error bars <= 0, or
    when no pixel is left to use.
    """
    names = {"wave": "wave", "flux": "flux", "err": "err", "use": "use", **(names or {})}
    wave, flux, err = (np.asarray(a, dtype=float) for a in (wave_A, flux, err))
    use = np.ones(wave.shape, bool) if use is None else np.asarray(use, dtype=bool)
    for role, arr in (("flux", flux), ("err", err), ("use", use)):
        if arr.shape != wave.shape or wave.ndim != 1:
            raise DataError(
                f"should have the same 1-D length as {names['wave']} ({wave.shape}) "
                f"but has shape {arr.shape}",
                file=source,
                column=names[role],
                value=arr.shape,
            )
    bad = np.flatnonzero(~np.isfinite(wave) | (wave <= 0))
    if bad.size:
        raise DataError(
            f"row {bad[0] + 1}: wavelength should be finite and > 0 but got {wave[bad[0]]}",
            file=source,
            column=names["wave"],
            value=wave[bad[0]],
        )
    step = np.flatnonzero(np.diff(wave) <= 0)
    if step.size:
        i = step[0]
        raise DataError(
            f"wavelengths should increase strictly but row {i + 2} ({wave[i + 1]:.6g} A) follows "
            f"{wave[i]:.6g} A",
            file=source,
            column=names["wave"],
            value=wave[i + 1],
        )
    nonpos = np.flatnonzero(np.isfinite(err) & (err <= 0))
    if nonpos.size:
        i = nonpos[0]
        raise DataError(
            f"row {i + 1}: error should be > 0 but got {err[i]:g}",
            file=source,
            column=names["err"],
            value=err[i],
        )
    mask = use & np.isfinite(flux) & np.isfinite(err)
    if not mask.any():
        raise DataError(
            f"all {wave.size} pixels are masked (non-finite flux/error or flagged)",
            file=source,
            column=names["flux"],
        )
    return Spectrum(
        wave=_readonly(wave, float),
        flux=_readonly(flux, float),
        err=_readonly(err, float),
        mask=_readonly(mask, bool),
        name=name,
        source=None if source is None else str(source),
    )


def _resolve_medium(air, medium, path):
    if air is None:
        return medium == "air"
    if medium is not None and bool(air) != (medium == "air"):
        raise DataError(
            f"air={air} contradicts the file, which says its wavelengths are in {medium}",
            file=path,
            column="medium",
            value=medium,
        )
    return bool(air)


def read_spectrum(path, *, air=None, wave_unit=None, flux_unit=None, columns=None):
    """Read a 1-D spectrum and convert it to vacuum Angstrom and F_lambda cgs.

    Parameters
    ----------
    path : str or path-like
        ``.fits`` (1-D image with spectral WCS and an ERR/IVAR/VAR extension,
        or a binary table), ``.ecsv`` (units from the file), or CSV / plain
        text (units from ``name [unit]`` headers or ``# flux_unit: ...``
        comments, or from the arguments).
    air : bool or None
        Whether the wavelengths are in air. None: as the file says (FITS
        CTYPE1 AWAV/WAVE, a ``medium`` keyword/meta/comment), vacuum if it
        says nothing. A value contradicting the file raises DataError.
    wave_unit, flux_unit : str or astropy.units.Unit, optional
        Override the file's units. The flux unit may be any flux density
        (per wavelength or per frequency, e.g. ``"W m-2 um-1"``, ``"mJy"``);
        errors take the flux unit unless the file gives them their own.
    columns : dict or sequence, optional
        Column names for tables: ``{"wave": ..., "flux": ..., "err": ...,
        "use": ..., "mask": ...}`` or ``(wave, flux, err[, use[, mask]])``.
        ``use`` is a flag column, non-zero = use; ``mask`` a bad-pixel column,
        non-zero = bad (NDData convention). For a FITS image, ``mask`` names
        the bad-pixel extension. Defaults: common names (wavelength/wave,
        flux, err/error/sigma..., mask/dq/quality/badpix), or the first three
        columns of a file without a header; a FITS image's MASK, DQ, QUALITY
        or BADPIX extension is used when present.

    Returns
    -------
    Spectrum
    """
    raw = read_raw(path, columns)
    names = raw["names"]
    w_unit = wave_unit if wave_unit is not None else raw["wave_unit"]
    f_unit = flux_unit if flux_unit is not None else raw["flux_unit"]
    e_unit = raw["err_unit"] if (raw["err_unit"] is not None and flux_unit is None) else f_unit
    for role, unit in (("wave", w_unit), ("flux", f_unit)):
        if unit is None:
            raise DataError(
                f"no unit for the {role} column; give {role}_unit=...",
                file=path,
                column=names[role],
            )
    wave = wave_to_A(raw["wave"], w_unit, file=path, column=names["wave"])
    if _resolve_medium(air, raw["medium"], path):
        wave = air_to_vacuum(wave)
    flux = flux_to_flam(raw["flux"], f_unit, wave, file=path, column=names["flux"])
    err = flux_to_flam(raw["err"], e_unit, wave, file=path, column=names["err"])
    stem = str(path).replace("\\", "/").rsplit("/", 1)[-1].split(".")[0]
    return make_spectrum(wave, flux, err, raw["use"], name=stem, source=path, names=names)


def from_specutils(spectrum1d, *, air=False, name="spectrum"):
    """Convert a ``specutils`` spectrum (``Spectrum`` / ``Spectrum1D``).

    specutils is imported only through the object passed in; it is not a
    teffmc dependency. A frequency or decreasing spectral axis is converted
    and reversed. The NDData mask (True = bad) becomes ``mask`` (True = use).

    Parameters
    ----------
    spectrum1d : specutils.Spectrum
        1-D spectrum with an uncertainty (std-dev, variance or inverse variance).
    air : bool
        Whether the spectral axis is in air wavelengths.
    name : str
        Label for the result.
    """
    import astropy.units as u
    from astropy.nddata import StdDevUncertainty

    axis = u.Quantity(spectrum1d.spectral_axis)
    wave = axis.to_value(u.AA, equivalencies=u.spectral())
    if spectrum1d.uncertainty is None:
        raise DataError("the spectrum has no uncertainty", file=name, column="uncertainty")
    sigma = spectrum1d.uncertainty.represent_as(StdDevUncertainty)
    flux_q, err_q = u.Quantity(spectrum1d.flux), sigma.array * (sigma.unit or spectrum1d.flux.unit)
    use = None if spectrum1d.mask is None else ~np.asarray(spectrum1d.mask, dtype=bool)
    if wave.size > 1 and wave[0] > wave[-1]:
        wave, flux_q, err_q = wave[::-1], flux_q[::-1], err_q[::-1]
        use = None if use is None else use[::-1]
    if air:
        wave = air_to_vacuum(wave)
    flux = flux_to_flam(flux_q.value, flux_q.unit, wave, file=name, column="flux")
    err = flux_to_flam(err_q.value, err_q.unit, wave, file=name, column="uncertainty")
    return make_spectrum(wave, flux, err, use, name=name, names={"err": "uncertainty"})


def apply_masks(spectrum, ranges=(), telluric=True):
    """Mask wavelength ranges (and the telluric bands) of a spectrum.

    Parameters
    ----------
    spectrum : Spectrum
    ranges : sequence of (float, float)
        Extra ``(lo, hi)`` vacuum-wavelength ranges [Angstrom] to exclude.
    telluric : bool
        Also exclude :data:`TELLURIC_BANDS`.

    Returns
    -------
    Spectrum
        A new spectrum; raises DataError if no pixel is left.
    """
    cut = list(ranges) + (list(TELLURIC_BANDS) if telluric else [])
    mask = np.array(spectrum.mask)
    for lo, hi in cut:
        if not hi > lo:
            raise DataError(
                f"mask range should have hi > lo but got ({lo}, {hi})",
                file=spectrum.source,
                column="mask",
                value=(lo, hi),
            )
        mask &= ~((spectrum.wave >= lo) & (spectrum.wave <= hi))
    if not mask.any():
        raise DataError(
            "every pixel is masked after applying the mask ranges",
            file=spectrum.source,
            column="mask",
            value=cut,
        )
    return replace(spectrum, mask=_readonly(mask, bool))
