"""Fuzzing, the large run (issue 13, acceptance 2): mutated configs, corrupted data files
and a sample of both through the command line.

Usage::

    python bench/bench_fuzz.py [--configs 2000] [--files 300] [--cli 20] [--timeout 20]

The strategies and the in-process runner are those of tests/test_fuzz.py (in
tests/fuzzing.py): a config mutation (1-4 edits: any value set to a random scalar, list
or table, keys deleted, added, wrapped in lists, list items duplicated) goes TOML text ->
load_config -> prepare (data read, parameter space, sampler settings) -> one
log-posterior evaluation; a corrupted data file (truncations, flipped / inserted /
deleted / zeroed bytes, tokens replaced, lines dropped or duplicated; ECSV, CSV, FITS
table and image spectra, ECSV photometry) goes through its reader. Each case has a time
limit (SIGALRM). Outcomes: ok, refused (a TeffmcError), crash (any other exception),
hang. Then ``--cli`` corrupted files and as many mutated configs run through
``python -m teffmc fit`` (a 20-step sampler): exit 0 or 2 with one line and no traceback.

Prints the counts, the distinct refusal keys and every crash or hang (with its case).

Measured: see DEVELOPERS.md, "Fuzzing".
"""

import argparse
import collections
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from hypothesis import HealthCheck, Phase, given, settings

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
import fuzzing  # noqa: E402

SETTINGS = dict(database=None, deadline=None, phases=(Phase.generate,),
                suppress_health_check=list(HealthCheck))


def _fuzz(strategy, n, run):
    counts, bad = collections.Counter(), []

    @settings(max_examples=n, **SETTINGS)
    @given(strategy)
    def case(x):
        outcome, detail = run(x)
        counts[outcome] += 1
        if outcome not in ("ok", "refused"):
            bad.append((outcome, x, detail))

    case()
    return counts, bad


def _cli(folder, config_text, timeout):
    path = folder / "cli.toml"
    path.write_text(config_text, encoding="utf-8")
    out = folder / "cli-run"
    try:
        res = subprocess.run([sys.executable, "-m", "teffmc", "fit", str(path), "--out",
                              str(out), "--quiet", "--overwrite"], capture_output=True,
                             text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return "hang", ""
    lines = res.stderr.strip().splitlines()
    if res.returncode == 0:
        return "ok", ""
    if res.returncode == 2 and len(lines) == 1 and "Traceback" not in res.stderr:
        return "refused", lines[0]
    return "crash", f"exit {res.returncode}: {res.stderr[-2000:]}"


def show(title, counts, bad, secs):
    n = sum(counts.values())
    print(f"{title}: {n} cases in {secs:.0f} s: " + ", ".join(
        f"{k} {counts[k]}" for k in ("ok", "refused", "crash", "hang")), flush=True)
    for outcome, case, detail in bad[:20]:
        print(f"  {outcome.upper()}: {case!r}\n    {detail.strip()[-600:]}", flush=True)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--configs", type=int, default=2000)
    ap.add_argument("--files", type=int, default=300)
    ap.add_argument("--cli", type=int, default=20, help="cases of each kind via the CLI")
    ap.add_argument("--timeout", type=float, default=20.0, help="seconds per case")
    args = ap.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="bench_fuzz_"))
    base = fuzzing.make_base(folder)
    base["sampler"].update(max_steps=20, min_steps=20, check_every=10)

    t0 = time.perf_counter()
    c_counts, c_bad = _fuzz(fuzzing.config_mutations(base), args.configs,
                            lambda cfg: fuzzing.run_config_case(folder, cfg,
                                                                timeout=args.timeout))
    t1 = time.perf_counter()
    f_counts, f_bad = _fuzz(fuzzing.file_corruptions(), args.files,
                            lambda c: fuzzing.run_data_case(folder, *c, timeout=args.timeout))
    t2 = time.perf_counter()

    show("config mutations (in-process)", c_counts, c_bad, t1 - t0)
    show("corrupted data files (in-process)", f_counts, f_bad, t2 - t1)

    # through the command line: corrupted files in the base config, and mutated configs
    cli_counts, cli_bad = collections.Counter(), []
    cli_cases = []

    @settings(max_examples=args.cli, **SETTINGS)
    @given(fuzzing.file_corruptions())
    def file_cases(c):
        cli_cases.append(("file", c))

    @settings(max_examples=args.cli, **SETTINGS)
    @given(fuzzing.config_mutations(base))
    def config_cases(cfg):
        cli_cases.append(("config", cfg))

    if args.cli > 0:
        file_cases()
        config_cases()
    for kind, case in cli_cases:
        if kind == "file":
            name, edits = case
            (folder / f"bad_{name}").write_bytes(fuzzing.corrupt((folder / name).read_bytes(),
                                                                 edits))
            cfg = fuzzing.copy.deepcopy(base)
            key = "photometry" if "phot" in name else None
            if key:
                cfg["epoch"][0]["photometry"] = f"bad_{name}"
            else:
                cfg["epoch"][0]["spectra"][0]["file"] = f"bad_{name}"
        else:
            cfg = case
        try:
            text = fuzzing._toml(cfg)
        except Exception:  # noqa: BLE001 (a value TOML cannot hold)
            continue
        outcome, detail = _cli(folder, text, timeout=120)
        cli_counts[outcome] += 1
        if outcome not in ("ok", "refused"):
            cli_bad.append((outcome, case, detail))
    t3 = time.perf_counter()

    show("through `teffmc fit`", cli_counts, cli_bad, t3 - t2)
    print(f"cases kept in {folder}")
    return 1 if (c_bad or f_bad or cli_bad) else 0


if __name__ == "__main__":
    sys.exit(main())
