"""Grain optical constants and Mie efficiencies against published values and limits."""

import os
import subprocess
import sys

import numpy as np
import pytest

from teffmc.dust import (
    MATERIALS,
    ConstantIndex,
    MieTable,
    cache,
    efficiencies,
    grain_optics,
    mietable,
)
from teffmc.errors import ConfigError, DataError


@pytest.fixture(autouse=True)
def _cache_in_tmp(tmp_path, monkeypatch):
    monkeypatch.setenv("TEFFMC_CACHE", str(tmp_path / "cache"))


# ---- optical constants ---------------------------------------------------------------

@pytest.mark.parametrize(
    "name, wave_aa, n_ref, tol",
    [
        # Malitson & Dodge 1972, n ~ 1.768 at 0.589 micron (given to 3 dp)
        # (docs/references.md#mie-theory-and-optical-constants)
        ("corundum", 5890.0, 1.768, 5e-4),
        # Malitson 1965, n = 1.4585 at 0.5893 micron; the Sellmeier fit gives 1.45840 there
        # (computed), so the check allows 1.5e-4
        # (docs/references.md#mie-theory-and-optical-constants).
        ("silica", 5893.0, 1.4585, 1.5e-4),
        # Draine & Lee 1984 from memory, approximate
        # (docs/references.md#mie-theory-and-optical-constants)
        ("silicate", 5500.0, 1.7, 1e-12),
    ],
)
def test_refractive_index_reference(name, wave_aa, n_ref, tol):
    m = MATERIALS[name].refractive_index([wave_aa])[0]
    assert abs(m.real - n_ref) < tol
    assert m.imag <= 0.0  # m = n - ik


def test_sellmeier_dispersion_is_normal_in_the_optical():
    for name in ("corundum", "silica"):
        n = MATERIALS[name].refractive_index(np.linspace(3500.0, 10000.0, 20)).real
        assert np.all(np.diff(n) < 0)


def test_material_range_and_sign_checks():
    with pytest.raises(DataError, match="valid from"):
        MATERIALS["silica"].refractive_index([50000.0])
    with pytest.raises(ConfigError, match="k should be >= 0"):
        ConstantIndex(1.5, -0.1)
    with pytest.raises(ConfigError, match="allowed: silicate, corundum, silica"):
        grain_optics("unobtainium", 1.0, [5500.0])


# ---- Mie reference cases -------------------------------------------------------------

@pytest.mark.parametrize(
    "m, x, q_ext, q_sca, g",
    [
        # Bohren & Huffman 1983, BHMIE example (from memory)
        (1.55, 5.2128, 3.10543, 3.10543, 0.63314),
        # Wiscombe 1979, NCAR MIEV0 test cases (docs/references.md#mie-theory-and-optical-constants)
        (1.5, 10.0, None, 2.882, None),
        (0.75, 10.0, None, 2.232265, 0.896473),
        (1.33 - 1e-5j, 1.0, None, 0.093923, 0.184517),
        (1.5 - 1j, 100.0, 2.097502, 1.283697, 0.850252),
        (10 - 10j, 1.0, None, 2.049405, -0.110664),
    ],
)
def test_mie_reference_values(m, x, q_ext, q_sca, g):
    got = efficiencies(m, x)
    for value, ref in zip(got, (q_ext, q_sca, g)):
        if ref is not None:
            assert float(value) == pytest.approx(ref, rel=1e-4)


def test_grain_optics_converts_radius_and_angstrom_to_size_parameter():
    # The BHMIE case (Bohren & Huffman 1983, from memory) as a grain: x = 2 pi a / lambda.
    mat = ConstantIndex(1.55, 0.0)
    radius = 5.2128 * 0.6328 / (2 * np.pi)  # [micron]
    q_ext, _, g = grain_optics(mat, radius, [6328.0])
    assert q_ext[0] == pytest.approx(3.10543, rel=1e-4)
    assert g[0] == pytest.approx(0.63314, rel=1e-4)


def test_positive_imaginary_part_is_refused_not_conjugated():
    with pytest.raises(ConfigError, match="n - ik"):
        efficiencies(1.5 + 0.1j, 1.0)


def _polarisability(m):
    # (m^2 - 1)/(m^2 + 2); with m = n - ik its imaginary part is negative, so the
    # textbook Q_abs = 4x Im[...] (m = n + ik, van de Hulst 1957) becomes -4x Im[...].
    return (m * m - 1) / (m * m + 2)


@pytest.mark.parametrize("m", [1.5 - 0.1j, 1.7 - 0.03j, 2.0 - 1.0j])
@pytest.mark.parametrize("x, rel", [(1e-3, 1e-4), (0.07, 0.03)])
def test_rayleigh_limit(m, x, rel):
    # van de Hulst 1957; Bohren & Huffman 1983: Q_sca -> (8/3) x^4 |K|^2,
    # Q_abs -> 4x |Im K| as x -> 0; corrections are O(x^2).
    q_ext, q_sca, _ = efficiencies(m, x)
    k = _polarisability(m)
    assert float(q_sca) == pytest.approx(8 / 3 * x**4 * abs(k) ** 2, rel=rel)
    assert float(q_ext - q_sca) == pytest.approx(-4 * x * k.imag, rel=rel)


def test_extinction_paradox_large_x():
    # Q_ext -> 2 as x -> infinity (van de Hulst 1957); the edge term falls as x^(-2/3).
    x = np.array([300.0, 3000.0])
    q_ext, _, _ = efficiencies(1.5 - 0.1j, x)
    dev = np.abs(q_ext - 2.0)
    assert dev[1] < 2.0 * x[1] ** (-2 / 3)
    assert dev[1] < dev[0]


# ---- grain size and colour -----------------------------------------------------------
# computed with miepython, m = 1.7 - 0.03i (docs/references.md#mie-theory-and-optical-constants)

@pytest.mark.parametrize(
    "radius, spread, ebv_av",
    [(0.1, 0.0, 0.97), (0.3, 0.0, -0.29), (1.0, 0.0, -0.09), (3.0, 0.0, -0.02), (1.0, 0.1, -0.02)],
)
def test_grain_size_colour(radius, spread, ebv_av):
    q_ext = grain_optics("silicate", radius, [4400.0, 5500.0], spread)[0]
    assert q_ext[0] / q_ext[1] - 1.0 == pytest.approx(ebv_av, abs=0.006)


def test_size_spread_averages_out_the_ripple():
    # transparent grains (k = 0) show the sharp resonance ripple at single size
    wave = np.linspace(5000.0, 6000.0, 21)
    single = grain_optics("corundum", 1.0, wave)[0]
    spread = grain_optics("corundum", 1.0, wave, 0.1)[0]
    assert np.std(np.diff(spread, 2)) < 0.1 * np.std(np.diff(single, 2))


# ---- the table ------------------------------------------------------------------------

WAVE = np.linspace(4000.0, 9000.0, 300)


def test_table_matches_direct_calculation_at_nodes_single_size():
    tab = MieTable("silicate", WAVE, 0.0, radius_range=(0.05, 3.0), n_radius=31)
    for r in tab.radius[[0, 10, 20, 30]]:
        direct = grain_optics("silicate", r, WAVE[::30])
        np.testing.assert_allclose(tab.q_ext([r])[0, ::30], direct[0], rtol=2e-4)
        np.testing.assert_allclose(tab.q_sca([r])[0, ::30], direct[1], rtol=2e-4)
        np.testing.assert_allclose(tab.asymmetry([r])[0, ::30], direct[2], atol=2e-4)


@pytest.mark.parametrize("material, rtol", [("silicate", 1.5e-3), ("corundum", 5e-3)])
def test_table_with_spread_between_nodes(material, rtol):
    # corundum (k = 0) has unresolved sharp resonances; the direct quadrature itself moves
    # by ~1e-3 when its step is refined (computed), hence the looser tolerance.
    tab = MieTable(material, WAVE, 0.1, radius_range=(0.05, 3.0))
    for r in (0.077, 0.31, 1.13, 2.6):
        direct = grain_optics(material, r, WAVE[::60], 0.1)
        np.testing.assert_allclose(tab.q_ext([r])[0, ::60], direct[0], rtol=rtol)
        np.testing.assert_allclose(tab.albedo([r])[0, ::60], direct[1] / direct[0], rtol=rtol)
        np.testing.assert_allclose(tab.asymmetry([r])[0, ::60], direct[2], atol=rtol)


def test_table_batch_shape_and_radius_range():
    tab = MieTable("silicate", WAVE, 0.1, radius_range=(0.1, 1.0), n_radius=11)
    assert tab.q_ext(np.full(5, 0.3)).shape == (5, WAVE.size)
    with pytest.raises(ConfigError, match="grain_radius"):
        tab.q_ext([0.05])


def test_table_is_cached_on_disk(tmp_path, monkeypatch):
    args = ("silicate", WAVE, 0.1, (0.1, 1.0), 11)
    first = MieTable(*args)
    files = list((tmp_path / "cache").glob("mie-*.npz"))
    assert len(files) == 1

    def boom(self):
        raise RuntimeError("recomputed although cached")

    monkeypatch.setattr(MieTable, "_compute", boom)
    again = MieTable(*args)
    np.testing.assert_array_equal(again.table_q_ext, first.table_q_ext)
    with pytest.raises(RuntimeError, match="recomputed"):
        MieTable("silicate", WAVE, 0.11, (0.1, 1.0), 11)  # another key


def test_damaged_cache_file_is_recomputed(tmp_path):
    args = ("silicate", WAVE[:50], 0.0, (0.1, 1.0), 5)
    first = MieTable(*args)
    (path,) = (tmp_path / "cache").glob("mie-*.npz")
    path.write_bytes(b"not a zip file")
    cache.forget()  # a new process: nothing in memory
    miss = cache.STATS["miss"]
    again = MieTable(*args)
    assert cache.STATS["miss"] == miss + 1
    np.testing.assert_array_equal(again.table_q_ext, first.table_q_ext)


def test_table_is_kept_in_memory_for_the_next_star(tmp_path, monkeypatch):
    # common practice, no source: a process fitting many stars reads each table once
    args = ("silicate", WAVE[:40], 0.1, (0.1, 1.0), 5)
    first = MieTable(*args)
    cache.forget()
    before = dict(cache.STATS)
    second = MieTable(*args)  # read from the file once ...
    monkeypatch.setattr(np, "load", lambda *a, **k: (_ for _ in ()).throw(OSError("no")))
    third = MieTable(*args)  # ... then from memory, without touching the file
    assert cache.STATS["disk"] == before["disk"] + 1
    assert cache.STATS["memory"] == before["memory"] + 1
    for t in (second, third):
        np.testing.assert_array_equal(t.table_q_ext, first.table_q_ext)
    assert not third.table_q_ext.flags.writeable  # one copy shared by the stars


def test_fine_x_grid_spans_and_steps():
    x = mietable._fine_x(0.01, 500.0, 0.002 * np.log(10), 0.4)
    assert x[0] == pytest.approx(0.01) and x[-1] == pytest.approx(500.0)
    assert np.all(np.diff(x) > 0) and np.diff(x).max() <= 0.4 + 1e-9


def test_no_jit_and_lazy_import():
    # miepython picks numba when MIEPYTHON_USE_JIT=1 at its import (miepython/_backend.py);
    # teffmc must import it lazily and with the pure-numpy backend whatever the caller set.
    code = (
        "import os, sys; import teffmc.dust as d; assert 'miepython' not in sys.modules;"
        "d.efficiencies(1.5, 2.0); import miepython;"
        "print(miepython.USE_JIT, os.environ['MIEPYTHON_USE_JIT'])"
    )
    env = dict(os.environ, MIEPYTHON_USE_JIT="1")
    out = subprocess.run([sys.executable, "-c", code], check=False, env=env, capture_output=True,
                         text=True,
                         cwd=os.path.dirname(os.path.dirname(__file__)))
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["False", "1"]
