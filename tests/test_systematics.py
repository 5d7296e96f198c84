"""Statistical-only intervals: the conditional of a bivariate normal at x = 0.

For (v, x) jointly normal, v | x=0 ~ N(mu_v - beta mu_x, s_v^2 (1 - r^2)), beta =
cov/var_x (textbook conditional normal, e.g. Rasmussen & Williams 2006 eq. A.6, from
memory).
"""

import numpy as np
import pytest

from teffmc.systematics import stat_only_draws, stat_summary


def test_conditional_normal_is_recovered(rng):
    n = 200_000
    x = rng.normal(0.1, 0.3, n)
    e = rng.normal(0.0, 5.0, n)
    v = 3600.0 + 80.0 * x + e              # Teff rises 80 K per unit ln(scale)
    s = stat_only_draws(v, x[:, None])
    assert s.mean() == pytest.approx(3600.0, abs=0.1)
    assert s.std() == pytest.approx(5.0, rel=0.01)
    # the marginal is wider: sqrt(5^2 + (80*0.3)^2) = 24.5
    assert v.std() == pytest.approx(np.hypot(5.0, 24.0), rel=0.01)
    out = stat_summary(v, x[:, None])
    assert out["p84_stat"] - out["p16_stat"] == pytest.approx(2 * 5.0, rel=0.02)


def test_two_nuisances(rng):
    n = 100_000
    x = rng.normal(0.0, 0.4, (n, 2))
    v = 10.0 + 3.0 * x[:, 0] - 2.0 * x[:, 1] + rng.normal(0, 0.5, n)
    assert stat_only_draws(v, x).std() == pytest.approx(0.5, rel=0.02)
