"""simulate_survey: the invented stars behind bench/bench_batch.py and examples/."""

import re

from teffmc.config import load_config
from teffmc.simulate import simulate_survey


def test_survey_configs_load_and_are_reproducible(tmp_path):
    a = simulate_survey(tmp_path / "a", 2, grid="blackbody", seed=3)
    b = simulate_survey(tmp_path / "b", 2, grid="blackbody", seed=3)
    assert [p.name for p in a] == ["star01.toml", "star02.toml"]
    for pa, pb in zip(a, b):
        cfg = load_config(pa)
        assert len(cfg.epochs) == 1 and cfg.epochs[0].photometry.is_file()
        assert len(cfg.epochs[0].spectra) == 1
        for suffix in (".toml", "_spec.ecsv", "_phot.ecsv"):
            fa = pa.with_name(pa.stem + suffix)
            fb = pb.with_name(pb.stem + suffix)
            assert fa.read_bytes() == fb.read_bytes()
        # the truth comment names the drawn values inside the documented ranges
        m = re.search(r"teff = ([\d.]+) K, a_v = ([\d.]+), theta = ([\d.]+) mas",
                      pa.read_text())
        teff, a_v, theta = (float(v) for v in m.groups())
        assert 3400 <= teff <= 4200 and 0.3 <= a_v <= 1.5 and 1.0 <= theta <= 5.0
    c = simulate_survey(tmp_path / "c", 1, grid="blackbody", seed=4)
    assert c[0].read_text() != a[0].read_text()


def test_survey_without_terms_has_five_free_parameters(tmp_path):
    """terms=False: the mismatch term and the grid nuisances off (bench_batch's survey
    star, 5 free parameters); formats goes to [report]."""
    from teffmc.run import prepare

    full = simulate_survey(tmp_path / "a", 1, seed=3)[0]
    five = simulate_survey(tmp_path / "b", 1, seed=3, terms=False, formats=["png", "csv"])[0]
    assert len(prepare(full, log=lambda m: None).space.names) == 10
    prep = prepare(five, log=lambda m: None)
    assert list(prep.space.names) == ["teff", "logg", "mh", "theta", "a_v"]
    assert prep.config.report_formats == ("png", "csv")
