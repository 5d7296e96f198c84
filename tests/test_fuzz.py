"""Fuzzing with a bounded budget (issue 13, acceptance 2; the large run is
bench/bench_fuzz.py): mutated configs through the validation teffmc does before it
writes anything, corrupted data files through the readers. Every case must end in
acceptance or a one-line TeffmcError -- no other exception, no hang (per-case limit).
"""

import pytest
from hypothesis import HealthCheck, Phase, given, settings

import fuzzing

SETTINGS = dict(database=None, deadline=None, derandomize=True,
                phases=(Phase.generate,),  # no shrinking: a failure is printed as found
                suppress_health_check=list(HealthCheck))


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    d = tmp_path_factory.mktemp("fuzz")
    return d, fuzzing.make_base(d)


def test_the_base_case_is_accepted(base):
    folder, cfg = base
    assert fuzzing.run_config_case(folder, cfg) == ("ok", "")
    for name in fuzzing.DATA_FILES:
        assert fuzzing.run_data_case(folder, name, []) == ("ok", ""), name


def test_the_time_limit_stops_a_hang():
    import time

    def forever():
        while True:
            time.sleep(0.01)

    assert fuzzing._outcome(forever, 0.2) == ("hang", "")


def test_mutated_configs(base):
    folder, cfg = base
    seen = {"ok": 0, "refused": 0}

    @settings(max_examples=100, **SETTINGS)
    @given(fuzzing.config_mutations(cfg))
    def case(mutated):
        outcome, detail = fuzzing.run_config_case(folder, mutated, timeout=20.0)
        assert outcome in ("ok", "refused"), f"{outcome}: {mutated}\n{detail}"
        seen[outcome] += 1

    case()
    assert seen["refused"] > 20 and seen["ok"] > 5, seen  # the mutations reach both ends


def test_corrupted_data_files(base):
    folder, _ = base
    seen = {"ok": 0, "refused": 0}

    @settings(max_examples=100, **SETTINGS)
    @given(fuzzing.file_corruptions())
    def case(corruption):
        name, edits = corruption
        outcome, detail = fuzzing.run_data_case(folder, name, edits, timeout=20.0)
        assert outcome in ("ok", "refused"), f"{outcome}: {name} {edits}\n{detail}"
        seen[outcome] += 1

    case()
    assert seen["refused"] > 20 and seen["ok"] > 0, seen
