"""Grid file format and multilinear interpolation."""

import numpy as np
import pytest

from teffmc.errors import GridError, OffGridError
from teffmc.photosphere import Grid, load_grid


def _toy_grid(rng, holes=()):
    teff = np.array([3000.0, 3500.0, 4000.0])
    logg = np.array([0.0, 1.0])
    mh = np.array([-0.5, 0.0])
    wave = np.linspace(4000.0, 9000.0, 50)
    lf = rng.normal(5.0, 0.3, (3, 2, 2, 50)).astype(np.float32)
    for h in holes:
        lf[h] = np.nan
    return Grid(teff, logg, mh, wave, lf, provenance={"source": "random test numbers"},
                name="toy")


def test_exact_at_nodes_and_round_trip(tmp_path, rng):
    g = _toy_grid(rng)
    g.write(tmp_path / "g.h5")
    g2 = load_grid(tmp_path / "g.h5")
    assert g2.checksum == g.checksum
    np.testing.assert_array_equal(g2.log_flux, g.log_flux)
    tt, gg, mm = np.meshgrid(g.teff, g.logg, g.mh, indexing="ij")
    out = g2.interpolate_log(tt.ravel(), gg.ravel(), mm.ravel())
    np.testing.assert_array_equal(out, g.log_flux.reshape(-1, 50).astype(float))


def test_multilinear_is_linear_in_each_axis(rng):
    # A log flux that is linear in the three axes is reproduced exactly (common practice,
    # no source: multilinear interpolation is exact for multilinear functions).
    teff, logg, mh = np.array([3000.0, 3500.0, 4000.0]), np.array([0.0, 1.0]), np.array([-1., 0.])
    wave = np.linspace(4000, 5000, 5)
    T, G, M = np.meshgrid(teff, logg, mh, indexing="ij")
    lf = (1e-3 * T + 0.2 * G - 0.3 * M)[..., None] + np.zeros(5)
    g = Grid(teff, logg, mh, wave, lf)
    pts = rng.uniform([3000, 0, -1], [4000, 1, 0], (20, 3))
    got = g.interpolate_log(*pts.T)[:, 0]
    want = 1e-3 * pts[:, 0] + 0.2 * pts[:, 1] - 0.3 * pts[:, 2]
    np.testing.assert_allclose(got, want, rtol=0, atol=2e-6)


def test_compiled_interpolation_equals_corner_sum(rng, monkeypatch):
    """The interpolation with a nuisance axis, by the dense product over the cells the
    walkers touch and by the compiled pass per corner, equals the 8-corner sum written
    out (common practice, no source); the masked form gives NaN rows off the grid."""
    import teffmc.photosphere.grid as grid_mod
    from teffmc.photosphere.nuisance import NuisanceAxis

    g = _toy_grid(rng)
    shape = g.log_flux.shape
    axis = NuisanceAxis(name="tio", step=np.log(2.0), minus=g.log_flux - 0.1 * rng.random(shape),
                        plus=g.log_flux + 0.2 * rng.random(shape), low=0.5, high=2.0, note="")
    g = Grid(g.teff, g.logg, g.mh, g.wave, g.log_flux, name="toy", nuisance=(axis,))
    pts = rng.uniform([3000, 0, -0.5], [4000, 1, 0], (30, 3))
    x = rng.uniform(-0.5, 0.5, 30)
    dense = g.interpolate_log(*pts.T, {"tio": x})            # the compiled pass
    off = np.array([[2999.0, 0.5, -0.2], [3500.0, np.nan, -0.2], [3500.0, 0.5, 0.01]])
    masked, ok = g.interpolate_log_masked(*np.vstack([pts, off]).T,
                                          {"tio": np.concatenate([x, np.zeros(3)])})
    np.testing.assert_array_equal(ok, [True] * 30 + [False] * 3)
    np.testing.assert_allclose(masked[:30], dense, rtol=0, atol=1e-12)
    assert np.all(np.isnan(masked[30:]))
    monkeypatch.setattr(grid_mod, "_DENSE_WORK", 0)          # the dense BLAS product
    np.testing.assert_allclose(g.interpolate_log(*pts.T, {"tio": x}), dense, rtol=0,
                               atol=1e-12)
    lf = g.log_flux.astype(float)
    d1 = (axis.plus - axis.minus) / (2 * axis.step)
    d2 = (axis.plus - 2 * g.log_flux + axis.minus) / axis.step**2
    for k, (t, lg, m) in enumerate(pts):
        i = min(np.searchsorted(g.teff, t, "right") - 1, 1)
        wi, wj, wk = (t - g.teff[i]) / 500.0, lg, (m + 0.5) / 0.5
        want = 0.0
        for a, b, c in np.ndindex(2, 2, 2):
            w = (wi if a else 1 - wi) * (wj if b else 1 - wj) * (wk if c else 1 - wk)
            node = (i + a, b, c)
            want = want + w * (lf[node] + x[k] * d1[node] + 0.5 * x[k] ** 2 * d2[node])
        np.testing.assert_allclose(dense[k], want, rtol=0, atol=1e-9)


@pytest.mark.parametrize("dense_work", [0, 10**9])
def test_face_next_to_a_hole_stays_finite(rng, monkeypatch, dense_work):
    """A point on the face of a cell away from a hole has zero weight on the hole and a
    finite flux, by both products; a point inside a cell touching it is off the grid."""
    import teffmc.photosphere.grid as grid_mod
    from teffmc.photosphere.nuisance import NuisanceAxis

    monkeypatch.setattr(grid_mod, "_DENSE_WORK", dense_work)
    g = _toy_grid(rng, holes=[(2, 0, 0)])        # 4000 K: a zero-weight corner at 3500 K
    axis = NuisanceAxis(name="tio", step=np.log(2.0), minus=g.log_flux - 0.1,
                        plus=g.log_flux + 0.1, low=0.5, high=2.0, note="")
    g = Grid(g.teff, g.logg, g.mh, g.wave, g.log_flux, name="toy", nuisance=(axis,))
    out, ok = g.interpolate_log_masked([3500.0, 3700.0], [0.5, 0.5], [-0.25, -0.25],
                                       {"tio": np.array([0.1, 0.1])})
    np.testing.assert_array_equal(ok, [True, False])
    assert np.all(np.isfinite(out[0])) and np.all(np.isnan(out[1]))


def test_off_grid_error_carries_point_and_bounds(rng):
    g = _toy_grid(rng)
    with pytest.raises(OffGridError) as e:
        g.interpolate(np.array([3600.0, 4200.0]), 0.5, 0.0)
    assert e.value.point["teff"] == 4200.0
    assert e.value.bounds["teff"] == (3000.0, 4000.0)
    assert "4200" in str(e.value) and "3000" in str(e.value)


def test_holes_are_never_crossed(rng):
    g = _toy_grid(rng, holes=[(1, 0, 0)])
    assert g.holes == [(3500.0, 0.0, -0.5)]
    # cells touching the hole are refused, others work
    assert not g.check_inside(3200.0, 0.5, -0.25)
    assert g.check_inside(3200.0, 1.0, 0.0)  # on the far face of the cell: no hole weight
    # ... and interpolating there gives the finite, plain linear mix of the two face nodes
    # (teff axis of the toy grid: a zero-weight hole corner must not poison it with NaN)
    f = g.interpolate_log(3200.0, 1.0, 0.0)[0]
    i = int(np.searchsorted(g.teff, 3200.0, side="right")) - 1
    w = (3200.0 - g.teff[i]) / (g.teff[i + 1] - g.teff[i])
    j, k = list(g.logg).index(1.0), list(g.mh).index(0.0)
    np.testing.assert_allclose(f, (1 - w) * g.log_flux[i, j, k] + w * g.log_flux[i + 1, j, k],
                               rtol=1e-12)
    with pytest.raises(OffGridError):
        g.interpolate(3700.0, 0.2, -0.4)


def test_corrupt_file_is_detected(tmp_path, rng):
    import h5py

    g = _toy_grid(rng)
    g.write(tmp_path / "g.h5")
    with h5py.File(tmp_path / "g.h5", "r+") as f:
        f["log_flux"][0, 0, 0, 0] += 1.0
    with pytest.raises(GridError, match="checksum"):
        Grid.read(tmp_path / "g.h5")


def test_excluded_regions_name_what_a_hole_removes_from_a_prior(rng):
    # a hole at (3500, 0, -0.5) removes the cells around it: teff 3000-4000, logg 0-1,
    # mh -0.5-0 (open at the neighbours' faces, where the hole has weight 0)
    g = _toy_grid(rng, holes=[(1, 0, 0)])
    full = {"teff": (3000.0, 4000.0), "logg": (0.0, 1.0), "mh": (-0.5, 0.0)}
    [(node, region)] = g.excluded_regions(full)
    assert node == (3500.0, 0.0, -0.5)
    assert region == {"teff": (3000.0, 4000.0), "logg": (0.0, 1.0), "mh": (-0.5, 0.0)}
    # a prior fixed on the far face (logg = 1) never gives the hole weight
    assert g.excluded_regions({**full, "logg": (1.0, 1.0)}) == []
    assert g.check_inside(3500.0, 1.0, -0.25)
    # a prior box that reaches in only part way: the region is clipped to it
    [(_, region)] = g.excluded_regions({**full, "teff": (3800.0, 4000.0)})
    assert region["teff"] == (3800.0, 4000.0)
    assert not g.check_inside(3900.0, 0.5, -0.25)
    assert _toy_grid(rng).excluded_regions(full) == []


def test_a_fit_whose_prior_crosses_a_hole_says_so(rng, tmp_path):
    from teffmc.config import load_config
    from teffmc.parameters import ParameterSpace
    from teffmc.pipeline import hole_cautions

    g = _toy_grid(rng, holes=[(1, 0, 0)])
    g.write(tmp_path / "toy.h5")
    (tmp_path / "p.ecsv").write_text("")
    (tmp_path / "c.toml").write_text(
        'grid = "toy.h5"\n[[epoch]]\nphotometry = "p.ecsv"\n[priors]\n'
        'teff = { dist = "uniform", low = 3000, high = 4000 }\n'
        'logg = { fixed = 0.5 }\nmh = { fixed = -0.2 }\n')
    cfg = load_config(tmp_path / "c.toml")
    notes = hole_cautions(ParameterSpace(cfg, g.bounds), g)
    assert len(notes) == 1 and "teff=3500" in notes[0] and "teff 3000-4000 K" in notes[0]


def test_grid_file_is_read_once_per_process_until_replaced(tmp_path, rng):
    # common practice, no source: a batch worker reads the grid once for all its stars,
    # keyed by path and modification time, so a replaced file is read again
    import os

    from teffmc.photosphere import grid_cache_info

    path = tmp_path / "g.h5"
    _toy_grid(rng).write(path)
    before = grid_cache_info()
    a = load_grid(path)
    b = load_grid(tmp_path / "." / "g.h5")
    assert a is b
    after = grid_cache_info()
    assert (after.hits, after.misses) == (before.hits + 1, before.misses + 1)
    new = _toy_grid(rng)
    new.write(tmp_path / "new.h5")
    os.replace(tmp_path / "new.h5", path)
    t = os.stat(path).st_mtime_ns + 10**9
    os.utime(path, ns=(t, t))  # a replaced file has a new modification time
    c = load_grid(path)
    assert c is not a and c.checksum == new.checksum != a.checksum


def test_grids_on_pixels_are_kept_per_grid(rng):
    """A grid on the same pixels and line-spread function is made once and shared (the
    stars of a survey observed alike); other pixels or resolutions give other grids."""
    g = _toy_grid(rng)
    wave = np.linspace(4500.0, 8500.0, 30)
    a = g.on_pixels(wave, resolution=500.0)
    assert g.on_pixels(wave.copy(), resolution=500.0) is a
    assert g.on_pixels(wave, resolution=1000.0) is not a
    assert g.on_pixels(wave + 1.0, resolution=500.0) is not a
    np.testing.assert_array_equal(g._made_on_pixels(wave, 500.0, None, False).log_flux,
                                  a.log_flux)
