"""The sampler's coordinates (sampling_coords.SamplerCoordinates) leave the priors unchanged.

Change of variables (common practice, no source): a density p(x) in x is p(x(u)) |dx/du|
in u; the Jacobian is checked against a finite-difference determinant, and the density
of prior draws mapped to u against exp(log p(u)).
"""

import numpy as np
import pytest

from teffmc.priors import Prior
from teffmc.sampling_coords import SamplerCoordinates


class _Space:
    names = ["teff", "theta", "veil_tau", "veil_cover"]
    priors = [Prior("uniform", low=3000.0, high=4500.0), Prior("loguniform", low=1.0, high=100.0),
              Prior("uniform", low=0.0, high=3.0), Prior("uniform", low=0.0, high=1.0)]

    def log_prior(self, x):
        x = np.atleast_2d(x)
        return sum(p.logpdf(x[:, i]) for i, p in enumerate(self.priors))

    def sample_prior(self, rng, n):
        return np.column_stack([p.sample(rng, n) for p in self.priors])


def _assert_jacobian(coords, points):
    """log |det dx/du| by central differences equals coords.jacobian at each point."""
    ndim = points.shape[1]
    for u in points:
        jac = np.empty((ndim, ndim))
        for j in range(ndim):
            h = 1e-6 * max(abs(u[j]), 1e-3)
            e = np.zeros(ndim)
            e[j] = h
            jac[:, j] = (coords.to_x(u + e) - coords.to_x(u - e)) / (2 * h)
        assert np.log(abs(np.linalg.det(jac))) == pytest.approx(coords.jacobian(u), abs=1e-6)


def test_round_trip_and_jacobian(rng):
    space = _Space()
    coords = SamplerCoordinates(space, space.log_prior)
    assert coords.pairs.tolist() == [[2, 3]]
    x = space.sample_prior(rng, 50)
    u = coords.to_u(x)
    np.testing.assert_allclose(coords.to_x(u), x, rtol=1e-10, atol=1e-12)
    _assert_jacobian(coords, u[:10])


def test_prior_draws_have_the_density_of_the_coordinates(rng):
    """Prior draws in x, mapped to (c, e), are distributed as exp(log p(u)): the priors
    of veil_tau and veil_cover are what the sampler sees."""
    space = _Space()
    coords = SamplerCoordinates(space, space.log_prior)
    n = 400_000
    u = coords.to_u(space.sample_prior(rng, n))
    edges = np.linspace(0.0, 1.0, 11)             # c
    e_edges = np.linspace(0.0, 2.0, 11)           # e = -ln(1 - d)
    counts, _, _ = np.histogram2d(u[:, 3], u[:, 2], bins=[edges, e_edges])
    fixed = np.array([3500.0, np.log(10.0)])
    sub = (np.arange(8) + 0.5) / 8 * 0.1
    checked = 0
    for a in range(10):
        for b in range(10):
            c_lo, e_hi = edges[a], e_edges[b + 1]
            if e_hi >= -np.log1p(-c_lo * (1 - np.exp(-3.0))) - 1e-12:
                continue        # the cell touches the edge of the support: skip
            cc, dd = np.meshgrid(c_lo + sub, e_edges[b] + 2 * sub, indexing="ij")
            pts = np.column_stack([np.full(cc.size, fixed[0]), np.full(cc.size, fixed[1]),
                                   dd.ravel(), cc.ravel()])
            dens = np.exp(coords(pts) - space.priors[0].logpdf(fixed[:1])
                          - (space.priors[1].logpdf(np.exp(fixed[1:])) + fixed[1]))
            expect = n * dens.mean() * 0.1 * 0.2
            assert abs(counts[a, b] - expect) < 5 * np.sqrt(expect) + 0.01 * expect
            checked += 1
    assert checked >= 20


class _ColourSpace(_Space):
    names = ["teff", "logg", "theta", "a_v"]
    priors = [Prior("uniform", low=3000.0, high=4500.0), Prior("uniform", low=0.0, high=1.0),
              Prior("loguniform", low=0.5, high=50.0), Prior("uniform", low=0.0, high=3.0)]

    def fixed_values(self):
        return {"mh": -0.25}


def _colour_table():
    """A small analytic V0, C0 table (test numbers) on a 4 x 2 x 2 node grid."""
    from teffmc.photosphere import Grid
    from teffmc.sampling_colour import ColourTable

    t, g = np.array([3000.0, 3500.0, 4000.0, 4500.0]), np.array([0.0, 1.0])
    m = np.array([-0.5, 0.0])
    tt, gg, mm = np.meshgrid(t, g, m, indexing="ij")
    cube = np.stack([8.0 - 2e-3 * (tt - 3000) + 0.1 * gg - 0.3 * mm,
                     5.0 - 1.5e-3 * (tt - 3000) + 0.05 * gg + 0.2 * mm], axis=-1)
    return ColourTable(Grid(t, g, m, np.array([1.0, 2.0]), cube, name="test colours"),
                       1.0, 0.12)


def test_colour_coordinates_round_trip_and_jacobian(rng):
    """(teff, logg, ln theta, a_v) <-> (teff, logg, V, C) with [M/H] fixed: x(u(x)) = x and
    log |dx/du| against a finite-difference determinant (change of variables, common
    practice, no source)."""
    space = _ColourSpace()
    coords = SamplerCoordinates(space, space.log_prior, colour=_colour_table())
    assert coords.coordinate_tag == "colour" and coords.colour["mh"] == -0.25
    x = space.sample_prior(rng, 40)
    u = coords.to_u(x)
    np.testing.assert_allclose(coords.to_x(u), x, rtol=1e-10, atol=1e-12)
    _assert_jacobian(coords, u[:8])
    # off the table's grid (teff beyond its nodes) the point is invalid, not extrapolated
    bad = u[:1].copy()
    bad[0, 0] = 5000.0
    assert np.all(np.isnan(coords.to_x(bad)[0, 2:])) and coords(bad)[0] == -np.inf


def test_colour_coordinates_only_where_they_apply():
    space = _ColourSpace()
    assert SamplerCoordinates(space, space.log_prior).colour is None
    uniform_theta = _ColourSpace()
    uniform_theta.priors = [*space.priors[:2], Prior("uniform", low=0.5, high=50.0),
                            space.priors[3]]
    assert SamplerCoordinates(uniform_theta, uniform_theta.log_prior,
                              colour=_colour_table()).colour is None


def test_colour_table_of_the_builtin_grid():
    """V0 at a node is the photometry channel's synthetic V at theta = 1 mas, A_V = 0, and
    the band extinctions follow the definition of A_V at 5500 A: A(V band) / A_V close to
    1 and A(Ks) / A_V ~ 0.1 (CCM89 at 2.2 micron ~0.12, from memory)."""
    from teffmc.photosphere import load_grid
    from teffmc.sampling_colour import colour_table

    grid = load_grid("builtin")
    table = colour_table(grid)
    assert 0.9 < table.k_v < 1.05 and 0.05 < table.k_k < 0.2
    v0, c0, ok = table.v0_c0(np.array([3600.0]), np.array([0.0]), np.array([0.0]))
    assert ok.all() and np.isfinite(v0).all() and 1.0 < c0[0] < 8.0   # M star V - Ks
    assert colour_table(load_grid("blackbody")) is None


def test_methods_say_when_the_colour_coordinates_were_used(tmp_path):
    """run.toml records the colour coordinates (teffmc.provenance) and the methods text
    says so, in Markdown and in LaTeX; a multi-epoch fit does not use them."""
    from teffmc.config import ModelSpec
    from teffmc.photosphere import load_grid
    from teffmc.provenance import run_provenance
    from teffmc.report.methods import methods_context, render_methods
    from teffmc.run import prepare
    from teffmc.simulate import simulate_epoch

    truth = {"teff": 3700.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 4.0}
    simulate_epoch(tmp_path, "o", load_grid("builtin"), ModelSpec(), truth,
                   wave_range=(6000.0, 7000.0), resolution=500.0, noise=False)
    epoch = ('[[epoch]]\nlabel = "{}"\nphotometry = "o_phot.ecsv"\n'
             'spectra = [{{ file = "o_spec.ecsv", resolution = 500.0 }}]\n')
    (tmp_path / "one.toml").write_text('grid = "builtin"\n' + epoch.format("a"))
    (tmp_path / "two.toml").write_text('grid = "builtin"\n' + epoch.format("a")
                                       + epoch.format("b"))
    quiet = {"log": lambda m: None}
    one = run_provenance(prepare(tmp_path / "one.toml", **quiet))
    two = run_provenance(prepare(tmp_path / "two.toml", **quiet))
    assert one["sampler"]["colour_coordinates"] is True
    assert two["sampler"]["colour_coordinates"] is False
    for rec, said in ((one, True), (two, False)):
        record = {"teffmc": {"provenance": rec}}
        md = render_methods(methods_context(record, {}), "md")[0]
        tex = render_methods(methods_context(record, {}), "tex")[0]
        assert ("synthetic V magnitude and V − Ks colour" in md) is said
        assert ("V$-$K$_s$ colour" in tex) is said
