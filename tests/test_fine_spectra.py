"""Spectra sampled much finer than the grid: modelled on the grid's own pixels and
convolved-resampled per call (teffmc.model.SpectrumChannel), instead of storing every model
on every data pixel. The two routes are the same linear operations in a different order
(interpolate between nodes, then convolve; or convolve every node, then interpolate), so
they agree to the size of the log-vs-linear interpolation difference."""

import numpy as np
import pytest

from teffmc.config import ModelSpec
from teffmc.model import FINE_DATA_FACTOR, SpectrumChannel
from teffmc.observe.spectrum import make_spectrum
from teffmc.photosphere import load_grid
from teffmc.priors import Prior

R_V = Prior("fixed", value=3.1)


@pytest.fixture(scope="module")
def grid():
    return load_grid("builtin")


def _channel(grid, n_pix, resolution, monkeypatch=None, factor=None):
    wave = np.geomspace(6000.0, 7500.0, n_pix)
    spec = make_spectrum(wave, np.ones_like(wave), np.full_like(wave, 0.01))
    if factor is not None:
        monkeypatch.setattr("teffmc.model.FINE_DATA_FACTOR", factor)
    return SpectrumChannel(spec, grid, ModelSpec(), R_V, resolution=resolution)


def _params(n):
    return {"teff": np.linspace(3400.0, 4100.0, n), "logg": np.full(n, 0.5),
            "mh": np.full(n, -0.2), "a_v": np.full(n, 1.0), "r_v": np.full(n, 3.1),
            "theta": np.full(n, 2.0)}


@pytest.mark.parametrize("resolution", [20000.0, None])
def test_fine_route_equals_the_stored_route(grid, monkeypatch, resolution):
    n_native = int(np.sum((grid.wave > 6000) & (grid.wave < 7500)))
    n_pix = int(6 * n_native)           # well above FINE_DATA_FACTOR x the grid's pixels
    fine = _channel(grid, n_pix, resolution)
    assert fine.resample is not None and fine.grid.wave.size < n_pix / FINE_DATA_FACTOR
    stored = _channel(grid, n_pix, resolution, monkeypatch, factor=1e9)
    assert stored.resample is None and stored.grid.wave.size == n_pix
    p = _params(6)
    a, b = fine.predict(p), stored.predict(p)
    assert a.shape == b.shape == (6, n_pix)
    rel = np.abs(a / b - 1.0)
    # same operations in another order: log-linear vs linear interpolation between grid
    # nodes differ by ~ (d ln F)^2 / 8 between nodes (common practice, no source)
    assert np.median(rel) < 2e-3 and rel.max() < 2e-2, (np.median(rel), rel.max())
    # memory: the stored route holds every model on every pixel, the fine route the grid's
    assert fine.grid.log_flux.nbytes * 4 < stored.grid.log_flux.nbytes


def test_coarse_data_keep_the_stored_route(grid):
    ch = _channel(grid, 300, 1000.0)
    assert ch.resample is None and ch.grid.wave.size == 300
