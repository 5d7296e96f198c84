"""The fade scenario without a veil (tests/hypotheses_scenario.py): the veil hypothesis must
not win clearly. A file of its own so that pytest-xdist fits it beside tests/test_hypotheses.py."""

import pytest

from hypotheses_scenario import row, scenario


@pytest.fixture(scope="module")
def without_veil(tmp_path_factory):
    return scenario(tmp_path_factory.mktemp("noveil"), 0.0, 2)


@pytest.mark.slow
def test_veil_does_not_win_clearly_without_a_veil(without_veil):
    veil, cool = row(without_veil, "veil"), row(without_veil, "cooling")
    assert veil["elpd_loo"] - cool["elpd_loo"] <= 2 * max(veil["se_diff"], cool["se_diff"])
