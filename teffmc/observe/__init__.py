"""Observations: spectra, photometry, air/vacuum, line-spread, filters, calibration.

Everything here works in vacuum Angstrom and F_lambda [erg s^-1 cm^-2 A^-1].
"""

from teffmc.observe.airvac import air_to_vacuum, refractive_index_air, vacuum_to_air
from teffmc.observe.bandset import AB_FNU0, VEGA_MAG, BandSet, synth_mag
from teffmc.observe.calibration import (
    CalibrationPosterior,
    calibration_mean,
    legendre_design,
    marginal_loglike,
    posterior_calibration,
    student_t_loglike,
)
from teffmc.observe.filters import Filter, get_filter, known_bands, vega_spectrum
from teffmc.observe.lsf import FWHM_PER_SIGMA, apply_lsf, convolve_resample, lsf_matrix
from teffmc.observe.photometry import Photometry, make_photometry, read_photometry
from teffmc.observe.spectrum import (
    TELLURIC_BANDS,
    Spectrum,
    apply_masks,
    from_specutils,
    read_spectrum,
)

__all__ = [
    "AB_FNU0",
    "FWHM_PER_SIGMA",
    "TELLURIC_BANDS",
    "VEGA_MAG",
    "BandSet",
    "CalibrationPosterior",
    "Filter",
    "Photometry",
    "Spectrum",
    "air_to_vacuum",
    "apply_lsf",
    "apply_masks",
    "calibration_mean",
    "convolve_resample",
    "from_specutils",
    "get_filter",
    "known_bands",
    "legendre_design",
    "lsf_matrix",
    "make_photometry",
    "marginal_loglike",
    "posterior_calibration",
    "read_photometry",
    "read_spectrum",
    "refractive_index_air",
    "student_t_loglike",
    "synth_mag",
    "vacuum_to_air",
    "vega_spectrum",
]
