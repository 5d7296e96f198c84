"""The sampler's coordinates: log, the veil's (c, e) pair and colour, with the Jacobian.

Colour coordinates: teffmc.sampling_colour.

See DEVELOPERS.md, "Sampler coordinates".
"""

from dataclasses import replace

import numpy as np

__all__ = ["SamplerCoordinates"]


class SamplerCoordinates:
    """The sampler's coordinates u; draws, summaries and files stay in x.

    * ln x for every parameter with a log-uniform prior: such a prior spanning decades
      is flat in ln x but piles up at the low end in x, and the ensemble moves
      (differences and stretches of walker positions) then mix slowly -- measured on the
      demo with a correlated mismatch term: tau of ``mismatch_scale`` 478 steps sampled
      in x, ~70-100 in ln x.
    * the veil's covering fraction c and optical depth tau, when both are free in an
      epoch, as (c, e) with e = -ln(1 - d) and d = c (1 - exp(-tau)) the fraction of
      the star's light the veil removes at 0.55 micron (before scattering): the data
      measure e almost directly, while c and tau trade along the curved ridge
      c (1 - e^-tau) = d, which the ensemble's straight-line moves cross slowly (tau
      ~300 steps in the issue). In e the dimming is a magnitude-like quantity, so its
      trade with the angular diameter (2 ln theta - e ~ const for grey grains) is a
      straight line too. d = 1 - e^-e, tau = -ln(1 - d / c), 0 <= d < c.

    The density in u carries the Jacobian, log p(u) = log p(x(u)) + log |dx/du| with
    log |dx/du| = sum ln x (log coordinates) + sum [-e - ln(c - d)] (veil pairs), so
    the priors on x are unchanged (tests/test_coordinates.py).
    """

    def __init__(self, space, log_post, colour=None):
        self.log_post = log_post
        self.space = space
        self.log = np.array([p.kind == "loguniform" for p in space.priors], bool)
        self.pairs = []
        names = list(space.names)
        for k, name in enumerate(names):
            base, at, label = name.partition("@")
            cover = "veil_cover" + at + label
            if base == "veil_tau" and cover in names:
                c = names.index(cover)
                if not (self.log[k] or self.log[c]):
                    self.pairs.append((k, c))
        self.pairs = np.array(self.pairs, int).reshape(-1, 2)
        self.colour = self._colour_slots(colour)

    @property
    def coordinate_tag(self):
        """Name of the coordinate system, stored in checkpoints ("standard" or "colour")."""
        return "colour" if self.colour is not None else "standard"

    def _colour_slots(self, table):
        """Columns of the colour coordinates (teffmc.sampling_colour), or None.

        Used when ``table`` is given and teff, theta and a_v are free in a single set
        (one epoch, or shared), theta has a log-uniform prior, teff and a_v are plain,
        and log g and [M/H] are free plain parameters or fixed.
        """
        if table is None:
            return None
        names = list(self.space.names)
        if not all(n in names for n in ("teff", "theta", "a_v")):
            return None
        it, ith, ia = (names.index(n) for n in ("teff", "theta", "a_v"))
        if not self.log[ith] or self.log[it] or self.log[ia]:
            return None
        fixed = self.space.fixed_values()
        slots = {"table": table, "teff": it, "theta": ith, "a_v": ia}
        for ax in ("logg", "mh"):
            if ax in names and not self.log[names.index(ax)]:
                slots[ax] = names.index(ax)
            elif ax in fixed:
                slots[ax] = float(fixed[ax])
            else:
                return None
        return slots

    def _axes(self, u):
        col = self.colour
        return [u[..., col[a]] if isinstance(col[a], int) else col[a]
                for a in ("teff", "logg", "mh")]

    def _from_colour(self, u):
        """Return a copy of u with (V, C) replaced by (ln theta, A_V)."""
        u = np.array(u, float, copy=True)
        if self.colour is not None:
            col = self.colour
            ln_theta, a_v = col["table"].to_theta_av(*self._axes(u), u[..., col["theta"]],
                                                     u[..., col["a_v"]])
            u[..., col["theta"]], u[..., col["a_v"]] = ln_theta, a_v
        return u

    def to_x(self, u):
        """Map sampler coordinates ``u`` (..., ndim) to parameters ``x``; NaN where invalid."""
        return self._x_of(self._from_colour(u))

    def _x_of(self, x):
        """Return x from u already out of colour coordinates (:meth:`_from_colour`), in place."""
        x[..., self.log] = np.exp(x[..., self.log])
        t, c = self.pairs[:, 0], self.pairs[:, 1]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            ratio = -np.expm1(-x[..., t]) / x[..., c]          # d / c
            inside = (ratio >= 0) & (ratio < 1)
            x[..., t] = np.where(inside, -np.log1p(-np.where(inside, ratio, 0.0)), np.nan)
        return x

    def to_u(self, x):
        """Map parameters ``x`` (..., ndim) to sampler coordinates ``u`` (inverse of to_x)."""
        u = np.array(x, float, copy=True)
        u[..., self.log] = np.log(u[..., self.log])
        t, c = self.pairs[:, 0], self.pairs[:, 1]
        u[..., t] = -np.log1p(u[..., c] * np.expm1(-u[..., t]))   # e = -ln(1 - d)
        if self.colour is not None:
            col = self.colour
            v, c = col["table"].to_v_c(*self._axes(u), u[..., col["theta"]], u[..., col["a_v"]])
            u[..., col["theta"]], u[..., col["a_v"]] = v, c
        return u

    def jacobian(self, u):
        """Return log |dx/du| at ``u`` (..., ndim), shape (...)."""
        return self._jacobian_of(self._from_colour(u))

    def _jacobian_of(self, u):
        """Return log |dx/du| from u already out of colour coordinates."""
        t, c = self.pairs[:, 0], self.pairs[:, 1]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            d = -np.expm1(-u[..., t])
            pair = -np.sum(u[..., t] + np.log(u[..., c] - d), axis=-1)
        const = self.colour["table"].log_det if self.colour is not None else 0.0
        return np.sum(u[..., self.log], axis=-1) + pair + const

    def __call__(self, u):
        """Return the log density in ``u``, log p(x(u)) + log |dx/du|, shape (n,).

        The colour coordinates are undone once and shared by x and the Jacobian (their
        table lookup is the costly part).
        """
        plain = self._from_colour(np.atleast_2d(np.asarray(u, float)))
        x = self._x_of(plain.copy())
        ok = np.all(np.isfinite(x), axis=1)
        out = np.full(x.shape[0], -np.inf)
        if ok.any():
            out[ok] = self.log_post(x[ok]) + self._jacobian_of(plain[ok])
        out[np.isnan(out)] = -np.inf
        return out

    def sample_prior(self, rng, n):
        """Draw ``n`` prior points with ``rng``, in ``u``, shape (n, ndim)."""
        return self.to_u(self.space.sample_prior(rng, n))

    def result_in_x(self, result):
        """Turn a :class:`~teffmc.sample.SampleResult` in u into one in x."""
        return replace(result, chain=self.to_x(result.chain),
                       log_prob=result.log_prob - self.jacobian(result.chain))
