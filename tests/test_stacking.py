"""Stacking weights (Yao et al. 2018, eq. 5, from memory) on cases with known answers."""

import numpy as np
import pytest

from teffmc.stacking import mixture_draws, stacking_weights


def test_a_uniformly_better_model_takes_all_the_weight():
    lpd = np.array([np.full(50, -1.0), np.full(50, -3.0)])
    w = stacking_weights(lpd)
    assert w[0] == pytest.approx(1.0, abs=1e-4)


def test_complementary_models_share_the_weight():
    """Model A predicts the first half well, B the second: the optimum of
    sum_i log(w a_i + (1-w) b_i) is w = 1/2 by symmetry."""
    good, bad = -1.0, -6.0
    a = np.r_[np.full(40, good), np.full(40, bad)]
    b = np.r_[np.full(40, bad), np.full(40, good)]
    w = stacking_weights(np.array([a, b]))
    assert w == pytest.approx([0.5, 0.5], abs=1e-4)


def test_weights_match_a_brute_force_grid_search(rng):
    lpd = rng.normal(-2.0, 1.0, (3, 200))
    w = stacking_weights(lpd)
    best, val = None, -np.inf
    for w1 in np.linspace(0, 1, 101):
        for w2 in np.linspace(0, 1 - w1, int(round((1 - w1) * 100)) + 1):
            ww = np.array([w1, w2, max(1 - w1 - w2, 0.0)])
            v = np.sum(np.log(ww @ np.exp(lpd) + 1e-300))
            if v > val:
                best, val = ww, v
    assert np.abs(w - best).max() < 0.02
    assert np.sum(np.log(w @ np.exp(lpd))) >= val - 1e-9


def test_mixture_draws_follow_the_weights(rng):
    x = mixture_draws([np.zeros(100), np.ones(100)], [0.25, 0.75], 40000, rng)
    assert x.mean() == pytest.approx(0.75, abs=0.01)
