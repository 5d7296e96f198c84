"""Speed benchmark: log-posterior evaluations per second and effective samples per second.

Run: ``nice -n 10 .venv/bin/python bench/bench_speed.py [--quick] [--only NAME ...]``.

Problems (data simulated by :mod:`teffmc.simulate` from the built-in grid, fixed seeds):

``standard``
    4000-pixel spectrum at R 2000 (4000-10873 A, 2 pixels per resolution element) + 10
    bands from U to Ks, Mie veil with scattering, calibration order 2, log g and [M/H]
    free, the default likelihood terms (correlated mismatch term by the Kalman filter,
    grid-physics nuisances), 48 walkers.
``standard_plain``
    the same without the mismatch term and the grid nuisances (the likelihood the
    issue's numbers were written for).
``demo``
    the invented demo star of ``teffmc demo``, its first hypothesis (veil), both epochs.
``veil_cover``
    the demo's faint epoch alone with ``veil_cover`` free (uniform 0-1) beside
    ``veil_tau`` (uniform 0-3): the degenerate pair.

For each: evaluations per second (walkers per second through the vectorised
log-posterior), the time of each stage of one call (interpolation, extinction, veil,
photometry, likelihood; the LSF convolution and resampling are done once per run and
shown as such), then the sampler as ``teffmc fit`` runs it (multi-start optimum, start
ball, emcee to the stop rule): tau per parameter, effective samples
``n_walkers * (n_steps - burn) / max tau``, effective samples per second of wall time
(start search included) and the wall time. ``--survey N`` adds N survey stars of
``bench/bench_batch.py`` fitted one after another (``teffmc.fit``, one process) and their
median wall time. The machine's load (``uptime``) is printed with every section.
``--lnl-out FILE`` saves ln posterior at fixed points of every problem; ``--lnl-ref FILE``
prints the largest difference from such a file (the check that a faster code gives the
same numbers as an older one).
"""

import os

for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[_v] = "1"   # one BLAS thread, set before numpy is imported

import argparse  # noqa: E402
import resource  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import textwrap  # noqa: E402
import time  # noqa: E402
from dataclasses import replace  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
from threadpoolctl import threadpool_limits  # noqa: E402

TRUTH = {"teff": 3700.0, "logg": 0.5, "mh": -0.2, "a_v": 0.5, "r_v": 3.1, "theta": 5.0,
         "veil_tau": 1.0, "veil_cover": 0.5, "grain_radius": 0.5, "veil_scatter": 0.5,
         "mismatch_amp": 0.03, "mismatch_scale": 1000.0, "mismatch_white": 0.01,
         "tio_scale": 1.2, "haze_scale": 0.9, "jitter": 1.0}
BANDS = ["bessell-U", "bessell-B", "bessell-V", "bessell-R", "bessell-I", "sdss2010-g",
         "sdss2010-r", "twomass-J", "twomass-H", "twomass-Ks"]


def uptime():
    return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()


def _time(fn, n, clock=time.perf_counter):
    fn()
    best = []
    for _ in range(3):           # best of three blocks: the machine is shared
        t = clock()
        for _ in range(n):
            fn()
        best.append((clock() - t) / n)
    return min(best) * 1e3


def _cpu(fn, n):
    return _time(fn, n, time.process_time)


def _quiet(msg):
    pass


# ---------------------------------------------------------------- the problems
def standard_problem(tmp, terms=""):
    from teffmc.config import ModelSpec
    from teffmc.photosphere import load_grid
    from teffmc.run import prepare
    from teffmc.simulate import simulate_epoch

    grid = load_grid("builtin")
    simulate_epoch(tmp, "std", grid, ModelSpec(veil="mie", scattering=True), TRUTH,
                   wave_range=(4000.0, 4000.0 * np.e), resolution=2000.0, bands=BANDS,
                   snr=100.0, mag_err=0.02, rng=np.random.default_rng(14))
    spec = ('file = "std_spec.ecsv", resolution = 2000.0, calibration_order = 2, '
            'telluric_mask = false' + (', mismatch = "none"' if terms else ""))
    (tmp / "std.toml").write_text(textwrap.dedent("""\
        grid = "builtin"
        [model]
        veil = "mie"
        scattering = true
        {nuisance}
        [[epoch]]
        photometry = "std_phot.ecsv"
        spectra = [{{ {spec} }}]
        [sampler]
        n_walkers = 48
        seed = 14
        """).format(nuisance="grid_nuisance = false" if terms else "", spec=spec))
    return prepare(tmp / "std.toml", log=_quiet)


def standard_plain_problem(tmp):
    """The standard problem with the likelihood of the issue's text (no mismatch term,
    no grid nuisances)."""
    return standard_problem(tmp, terms="plain")


def demo_problem(tmp):
    from teffmc.config import load_config
    from teffmc.demo import make_demo_data
    from teffmc.run import prepare

    cfg = load_config(make_demo_data(tmp / "demo"))
    variants = cfg.variants()
    return prepare(variants[0][1], log=_quiet, other_models=[v.model for _, v in variants])


def veil_cover_problem(tmp):
    from teffmc.demo import make_demo_data
    from teffmc.run import prepare

    folder = tmp / "vc"
    make_demo_data(folder)
    (folder / "vc.toml").write_text(textwrap.dedent("""\
        name = "invented veiled star, veil_cover free"
        grid = "builtin"
        [model]
        veil = "mie"
        [[epoch]]
        photometry = "faint_phot.ecsv"
        spectra = [{ file = "faint_spec.ecsv", resolution = 1000.0, calibration_order = 2, calibration_sigma = 0.05 }]
        [priors]
        teff = { dist = "uniform", low = 3000.0, high = 4500.0 }
        logg = { fixed = 0.0 }
        mh = { fixed = 0.0 }
        a_v = { dist = "uniform", low = 0.0, high = 4.0 }
        theta = { dist = "loguniform", low = 1.0, high = 100.0 }
        veil_tau = { dist = "uniform", low = 0.0, high = 3.0 }
        veil_cover = { dist = "uniform", low = 0.0, high = 1.0 }
        grain_radius = { dist = "loguniform", low = 0.05, high = 3.0 }
        [sampler]
        n_walkers = 32
        max_steps = 25000
        check_every = 250
        seed = 7
        """))  # noqa: E501
    return prepare(folder / "vc.toml", log=_quiet)


PROBLEMS = {"standard": standard_problem, "standard_plain": standard_plain_problem,
            "demo": demo_problem,
            "veil_cover": veil_cover_problem}


# ---------------------------------------------------------------- per-call cost
def test_points(name, prep, n):
    """n points near the problem's true values (fixed seed), inside the priors."""
    rng = np.random.default_rng(5)
    lows = np.array([p.support[0] for p in prep.space.priors])
    highs = np.array([p.support[1] for p in prep.space.priors])
    guess = TRUTH if name.startswith("standard") else {
        **TRUTH, "teff": 3600.0, "a_v": 0.9, "theta": 12.0, "veil_tau": 0.7,
        "veil_cover": 0.9, "grain_radius": 1.0}
    x0 = np.array([guess.get(nm.partition("@")[0], 1.0) for nm in prep.space.names])
    x0 = np.clip(x0, lows + 1e-6 * (highs - lows), highs - 1e-6 * (highs - lows))
    x = x0 * (1 + 1e-3 * rng.normal(size=(n, x0.size)))
    return np.clip(x, lows, highs)


class _Fixed:
    """A channel whose prediction is given: times the likelihood alone."""

    def __init__(self, ch, model):
        self._ch, self._model = ch, model

    def __getattr__(self, name):
        return getattr(self._ch, name)

    def predict(self, p):
        return self._model


def stage_times(prep, x, n):
    """{stage: CPU ms per call} summed over the channels of every epoch (CPU time: on a
    shared machine the wall time of a stage mostly measures the other processes)."""
    from teffmc.components import interstellar, veil
    from teffmc.model import grid_nuisance

    post = prep.log_post
    out = dict.fromkeys(("interpolation", "extinction", "veil", "photometry (band sums)",
                         "likelihood (calibration, mismatch filter)", "forward model total"),
                        0.0)
    for label, chans in prep.channels.items():
        p = prep.space.epoch_values(x, label)
        for ch in chans:
            nuis = grid_nuisance(ch.grid, p)
            out["interpolation"] += _cpu(lambda ch=ch, p=p, nuis=nuis: ch.grid.interpolate_log(
                p["teff"], p["logg"], p["mh"], nuis), n)
            st = ch.terms.states
            out["extinction"] += _cpu(lambda p=p, s=st["interstellar"]:
                                      interstellar.log10_transmission(s, p), n)
            if "veil" in st:
                out["veil"] += _cpu(lambda p=p, s=st["veil"]: veil.factor(s, p), n)
            out["forward model total"] += _cpu(lambda ch=ch, p=p: ch.predict(p), n)
            model = ch.predict(p)
            if ch.kind == "photometry":
                from teffmc.model import observed_flux

                flux = observed_flux(ch.grid, ch.terms, p)
                out["photometry (band sums)"] += _cpu(lambda ch=ch, f=flux: ch.bandset.mags(f), n)
            fixed = _Fixed(ch, model)
            out["likelihood (calibration, mismatch filter)"] += _cpu(
                lambda f=fixed, p=p: post.channel_loglike(f, p), n)
    return out


def lsf_once(prep):
    """Seconds to convolve and resample the grid to every spectrum once (per run)."""
    from teffmc.photosphere import load_grid

    grid = load_grid(prep.config.grid)
    t = time.perf_counter()
    for ep in prep.config.epochs:
        for spec, ch in zip(ep.spectra, prep.channels[ep.label]):
            grid.on_pixels(ch.wave, resolution=spec.resolution, fwhm_A=spec.fwhm_A)
    return time.perf_counter() - t


def call_cost(name, prep, n_rep, lnl):
    nw = prep.config.sampler.n_walkers
    x = test_points(name, prep, nw)
    ms = _time(lambda: prep.log_post(x), n_rep)
    cpu = _time(lambda: prep.log_post(x), n_rep, time.process_time)
    pix = [f"{ch.name} {ch.n_points} pts" + (f" on {ch.wave.size} model pixels"
                                            if ch.kind == "photometry" else "")
           for chans in prep.channels.values() for ch in chans]
    print(f"  {prep.space.ndim} free parameters: {', '.join(prep.space.names)}")
    print(f"  data: {'; '.join(pix)}")
    print(f"  log posterior, {nw} walkers: {ms:.3f} ms per call = "
          f"{nw / ms * 1e3:,.0f} evaluations/s (wall); CPU time {cpu:.3f} ms = "
          f"{nw / cpu * 1e3:,.0f} evaluations per CPU second")
    for stage, t in stage_times(prep, x, n_rep).items():
        print(f"    {stage:44s} {t:8.3f} ms CPU")
    print(f"    {'LSF convolution + resampling':44s} per run, not per call: "
          f"{lsf_once(prep):.2f} s once")
    lnl[name] = (x, prep.log_post(x))
    return ms


# ---------------------------------------------------------------- sampling
def sample(name, prep, max_steps):
    from teffmc.pipeline import sample_posterior

    s = prep.config.sampler
    if max_steps is not None:
        s = replace(s, max_steps=max_steps, min_steps=min(s.min_steps, max_steps))
    prep = replace(prep, config=replace(prep.config, sampler=s))
    lines = []
    t, c = time.perf_counter(), time.process_time()
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = sample_posterior(prep, None, resume=False, quiet=True, log=lines.append)
    wall, cpu = time.perf_counter() - t, time.process_time() - c
    ess = s.n_walkers * (res.n_steps - res.burn) / float(np.max(res.tau))
    print(f"  sampler: {s.n_walkers} walkers, {res.n_steps} steps "
          f"({'converged' if res.converged else 'NOT converged'}), "
          f"acceptance {np.mean(res.acceptance_fraction):.2f}, burn {res.burn}")
    print("  tau [steps]: " + ", ".join(f"{n} {t:.0f}" for n, t in zip(res.names, res.tau)))
    print(f"  effective samples (worst parameter) {ess:,.0f}; wall time to the stop rule "
          f"{wall:.1f} s (CPU {cpu:.1f} s); effective samples per second {ess / wall:.2f} "
          f"(per CPU second {ess / cpu:.2f})")
    return res, wall


def survey(n, tmp):
    from teffmc import fit
    from teffmc.simulate import simulate_survey

    configs = simulate_survey(tmp / "survey", n)
    times, cpus = [], []
    for c in configs:
        t, cpu = time.perf_counter(), time.process_time()
        r = fit(c, tmp / "survey" / f"run-{c.stem}", quiet=True)
        times.append(time.perf_counter() - t)
        cpus.append(time.process_time() - cpu)
        print(f"  {c.stem}: {times[-1]:.1f} s (CPU {cpus[-1]:.1f} s), "
              f"{'converged' if r.summary['converged'] else 'NOT'}"
              f", {r.summary['n_steps']} steps, max tau "
              f"{max(r.summary['tau'].values()):.0f}")
    print(f"  median wall time per survey star: {statistics.median(times):.1f} s "
          f"(CPU {statistics.median(cpus):.1f} s)")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true",
                    help="fewer timing repetitions and at most 2000 sampler steps")
    ap.add_argument("--only", nargs="+", choices=list(PROBLEMS), default=list(PROBLEMS))
    ap.add_argument("--no-sample", action="store_true", help="per-call cost only")
    ap.add_argument("--max-steps", type=int, help="cap the sampler's steps")
    ap.add_argument("--survey", type=int, default=0, help="also fit N survey stars")
    ap.add_argument("--lnl-out", help="save ln posterior at fixed points (npz)")
    ap.add_argument("--lnl-ref", help="compare ln posterior with a saved npz")
    args = ap.parse_args()
    max_steps = args.max_steps or (2000 if args.quick else None)
    n_rep = 10 if args.quick else 40
    tmp = Path(tempfile.mkdtemp(prefix="bench_speed_"))
    print(f"bench_speed: {time.strftime('%Y-%m-%d %H:%M:%S %Z')}")
    lnl = {}
    with threadpool_limits(limits=1):
        for name in args.only:
            print(f"\n== {name}   [{uptime()}]")
            prep = PROBLEMS[name](tmp)
            call_cost(name, prep, n_rep, lnl)
            if not args.no_sample:
                sample(name, prep, max_steps)
                if name.startswith("standard"):
                    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
                    print(f"  peak RSS of the process after the standard fit: {rss:.0f} MB")
        if args.survey:
            print(f"\n== survey stars (bench_batch's), one process   [{uptime()}]")
            survey(args.survey, tmp)
    if args.lnl_out:
        np.savez(args.lnl_out, **{f"{k}_x": v[0] for k, v in lnl.items()},
                 **{f"{k}_lnp": v[1] for k, v in lnl.items()})
    if args.lnl_ref:
        ref = np.load(args.lnl_ref)
        print()
        for k in lnl:
            if f"{k}_lnp" in ref:
                x = ref[f"{k}_x"]
                prep = PROBLEMS[k](tmp)
                d = np.max(np.abs(prep.log_post(x) - ref[f"{k}_lnp"]))
                print(f"ln posterior vs {args.lnl_ref} ({k}): max |difference| {d:.2e}")
    print(f"\nend [{uptime()}]")


if __name__ == "__main__":
    main()
