"""Observations: spectra, photometry, air/vacuum, line-spread, filters, calibration.

Everything here works in vacuum Angstrom and F_lambda [erg s^-1 cm^-2 A^-1].
"""

from teffmc.observe.airvac import air_to_vacuum, refractive_index_air, vacuum_to_air
from teffmc.observe.bandset import AB_FNU0, VEGA_MAG, BandSet, synth_mag
from teffmc.observe.calibration import (
    CalibrationPosterior,
    legendre_design,
    marginal_loglike,
    posterior_calibration,
    student_t_loglike,
)
from teffmc.observe.filters import Filter, get_filter, known_bands, vega_spectrum
from teffmc.observe.photometry import Photometry, make_photometry, read_photometry
from teffmc.observe.lsf import FWHM_PER_SIGMA, apply_lsf, convolve_resample, lsf_matrix
from teffmc.observe.spectrum import (
    TELLURIC_BANDS,
    Spectrum,
    apply_masks,
    from_specutils,
    read_spectrum,
)

__all__ = [
    "air_to_vacuum",
    "vacuum_to_air",
    "refractive_index_air",
    "Spectrum",
    "read_spectrum",
    "from_specutils",
    "apply_masks",
    "TELLURIC_BANDS",
    "lsf_matrix",
    "apply_lsf",
    "convolve_resample",
    "FWHM_PER_SIGMA",
    "Filter",
    "get_filter",
    "known_bands",
    "vega_spectrum",
    "BandSet",
    "synth_mag",
    "VEGA_MAG",
    "AB_FNU0",
    "Photometry",
    "make_photometry",
    "read_photometry",
    "legendre_design",
    "marginal_loglike",
    "posterior_calibration",
    "CalibrationPosterior",
    "student_t_loglike",
]
