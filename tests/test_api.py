"""The public Python API of DESIGN.md section 3."""

import numpy as np
import pytest

import teffmc


def test_public_api_round_trip():
    grid = teffmc.load_grid()
    wave, flux = grid.spectrum(teff=3600.0, logg=0.0, mh=0.0)
    assert np.all(np.diff(wave) > 0) and np.all(flux > 0)
    mag = teffmc.synth_mag(wave, flux, "bessell-V", system="vega")
    assert np.isfinite(mag)
    a = teffmc.extinction_curve("CCM89", r_v=3.1, wave=np.array([5500.0]))
    # CCM89 A_lambda/A_V at 0.55 um = 0.9989 (computed with dust_extinction,
    # docs/references.md#extinction-laws)
    assert a[0] == pytest.approx(0.9989, abs=1e-3)
    q_ext, q_sca, g = teffmc.grain_optics("silicate", radius_um=0.5, wave=np.array([5500.0]))
    assert 0 < q_sca[0] <= q_ext[0] and -1 < g[0] < 1
    assert callable(teffmc.fit)
    assert isinstance(teffmc.__version__, str)
    with pytest.raises(AttributeError):
        teffmc.no_such_thing  # noqa: B018
