"""The grid builder: reproducible bytes whatever the number of workers, valid file."""

import pytest

from teffmc.photosphere.grid import Grid
from teffmc.photosphere.synth import build_grid

KW = {"teff": [3600.0], "logg": [0.0, 1.0], "mh": [0.0]}


@pytest.fixture(scope="module")
def small_build(tmp_path_factory):
    """Two nodes and their nuisance grids, built in-process (one worker)."""
    return build_grid(tmp_path_factory.mktemp("synth") / "a.h5", workers=1, **KW)


def test_build_is_reproducible_and_readable(small_build, tmp_path):
    # same inputs -> same flux bytes -> same checksum (DESIGN.md: reproducible grid build),
    # with 1 worker in-process and 2 spawned workers
    g1 = small_build
    g2 = build_grid(tmp_path / "b.h5", workers=2, **KW)
    if g1.checksum != g2.checksum:
        pytest.fail("grid checksum depends on the number of workers")
    back = Grid.read(str(tmp_path / "b.h5"))
    if back.checksum != g1.checksum or back.holes:
        pytest.fail(f"re-read grid differs or has holes: {back.holes}")
    if not float(back.provenance["energy_max_abs_deviation"]) < 0.03:
        pytest.fail("energy check of the small build failed")
    # the nuisance axes are part of the file and of the reproducible build
    assert back.nuisance_names == ("tio", "haze")
    from teffmc.photosphere.nuisance import nuisance_checksum
    assert nuisance_checksum(g1.nuisance) == nuisance_checksum(g2.nuisance)


def test_tio_axis_deepens_the_7054_band(small_build):
    """Twice the TiO opacity deepens the TiO 7054 A band head at 3600 K (its depth grows
    with the band opacity: curve of growth, common practice, no source)."""

    g = small_build                     # node (3600 K, log g 0, [M/H] 0) is [0, 0, 0]
    a = g.nuisance[0]
    w = g.wave
    band = (w > 7060) & (w < 7100)      # vacuum, just redward of the head
    cont = (w > 7030) & (w < 7045)

    def depth(lf):
        f = 10.0 ** lf[0, 0, 0]
        return 1 - f[band].mean() / f[cont].mean()

    assert depth(a.minus) < depth(g.log_flux) < depth(a.plus)


def test_workers_validated(tmp_path):
    from teffmc.errors import GridError
    with pytest.raises(GridError):
        build_grid(tmp_path / "c.h5", workers=0, teff=[3500.0], logg=[0.0], mh=[0.0])
