"""Fuzzing helpers shared by tests/test_fuzz.py (small budget, CI) and bench/bench_fuzz.py
(the large run): hypothesis strategies that mutate a valid config or corrupt a valid
data file, and a runner that sends a case through teffmc's in-process path with a
per-case timeout and sorts the outcome.

Outcomes: "ok" (accepted), "refused" (a TeffmcError: the one-line message users see),
"crash" (any other exception: a bug), "hang" (the per-case timeout fired).
"""

import copy
import signal
import tomllib
import traceback
import warnings
from contextlib import contextmanager
from pathlib import Path

import numpy as np
from hypothesis import strategies as st

from teffmc.errors import TeffmcError

__all__ = ["make_base", "config_mutations", "file_corruptions", "run_config_case",
           "run_data_case", "Hang"]

BASE_CONFIG = {
    "name": "fuzz (invented)",
    "grid": "blackbody",
    "epoch": [{
        "label": "obs",
        "photometry": "s_phot.ecsv",
        "spectra": [{"file": "s_spec.ecsv", "resolution": 300.0, "wave_range": [4500.0, 9000.0],
                     "mask": [[6000.0, 6010.0]], "telluric_mask": True,
                     "calibration_order": 1, "calibration_sigma": 0.2, "rv_kms": 10.0,
                     "mismatch": "none"}],
    }],
    "model": {"extinction_law": "CCM89", "veil": "none", "likelihood": "gaussian"},
    "priors": {"teff": {"dist": "uniform", "low": 3000.0, "high": 6000.0},
               "logg": {"fixed": 0.0}, "mh": {"fixed": 0.0},
               "a_v": {"dist": "uniform", "low": 0.0, "high": 3.0},
               "theta": {"dist": "loguniform", "low": 0.5, "high": 8.0}},
    "sampler": {"n_walkers": 16, "max_steps": 100, "min_steps": 50, "check_every": 50,
                "n_starts": 2, "seed": 3},
    "distance_pc": {"dist": "normal", "mean": 500.0, "sd": 50.0},
}


def make_base(folder):
    """Write the valid data files into ``folder``; return the base config (a dict)."""
    from teffmc.config import ModelSpec
    from teffmc.photosphere import load_grid
    from teffmc.simulate import simulate_epoch

    truth = {"teff": 4000.0, "logg": 0.0, "mh": 0.0, "a_v": 0.5, "r_v": 3.1, "theta": 2.0}
    simulate_epoch(folder, "s", load_grid("blackbody"), ModelSpec(), truth, resolution=300.0,
                   wave_range=(4400.0, 9200.0), rng=np.random.default_rng(1))
    _other_formats(folder)
    return copy.deepcopy(BASE_CONFIG)


def _other_formats(folder):
    """The spectrum also as CSV text and as a FITS table and image (the readers' paths)."""
    from astropy.io import fits
    from astropy.table import Table

    t = Table.read(folder / "s_spec.ecsv", format="ascii.ecsv")
    wave, flux, err = (np.asarray(t[c], float) for c in t.colnames[:3])
    with open(folder / "s_spec.csv", "w", encoding="utf-8") as f:
        f.write("wave [Angstrom],flux [erg / (s cm2 Angstrom)],err [erg / (s cm2 Angstrom)]\n")
        for row in zip(wave, flux, err):
            f.write(",".join(f"{v:.8g}" for v in row) + "\n")
    t.write(folder / "s_spec_table.fits", overwrite=True)
    hdu = fits.PrimaryHDU(flux)
    hdu.header.update(CRVAL1=wave[0], CDELT1=wave[1] - wave[0], CRPIX1=1.0, CUNIT1="Angstrom",
                      CTYPE1="WAVE", BUNIT="erg / (s cm2 Angstrom)")
    fits.HDUList([hdu, fits.ImageHDU(err, name="ERR")]).writeto(folder / "s_spec_image.fits",
                                                                overwrite=True)


# ------------------------------------------------------------------- config mutations

def _paths(obj, prefix=()):
    """Every (path, value) in a nested dict/list."""
    out = [(prefix, obj)]
    if isinstance(obj, dict):
        for k, v in obj.items():
            out += _paths(v, (*prefix, k))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            out += _paths(v, (*prefix, i))
    return out


NAMES = ["teff", "logg", "mh", "a_v", "r_v", "theta", "tau_v", "grain_size_um", "veil",
         "file", "photometry", "spectra", "resolution", "fwhm_A", "dist", "low", "high",
         "mean", "sd", "fixed", "n_walkers", "seed", "label", "epoch", "grid", "wave_range",
         "mask", "columns", "wave", "flux", "err", "use", "hypothesis", "name", "shared",
         "likelihood", "student_nu", "mismatch", "calibration_order", "parallax_mas",
         "distance_pc", "wave_unit", "flux_unit", "air", "rv_kms", "nlive", "evidence",
         "checkpoint_every", "min_steps", "max_steps", "scatter_cone_deg", "x"]

_scalars = st.one_of(
    st.integers(min_value=-(2 ** 70), max_value=2 ** 70),
    st.sampled_from([0, 1, 2, -1, 3, 7, 100, 2 ** 63, 2 ** 64]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1e-300, 1e300, -5.0, 0.5, 3000.0, 1e5, float("nan")]),
    st.booleans(),
    st.text(max_size=12),
    st.sampled_from(NAMES + ["blackbody", "builtin", "uniform", "normal", "loguniform",
                             "truncnormal", "none", "correlated", "student_t", "nm",
                             "Jy", "s_phot.ecsv", "s_spec.csv", "s_spec_table.fits",
                             "s_spec_image.fits", "nowhere.ecsv", ".", "/", "$\\frac{a",
                             "mie", "CCM89", "F99"]),
)
_values = st.recursive(_scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=3), st.dictionaries(st.sampled_from(NAMES), inner, max_size=3)),
    max_leaves=6)
_mutation = st.tuples(st.sampled_from(["set", "delete", "add", "wrap", "dup"]),
                      st.integers(min_value=0, max_value=10 ** 6), st.sampled_from(NAMES),
                      _values)


@st.composite
def config_mutations(draw, base):
    """A mutated copy of ``base``: 1 to 4 edits (set a value anywhere, delete a key, add
    a key, wrap a value in a list, duplicate a list item)."""
    cfg = copy.deepcopy(base)
    for op, where, key, value in draw(st.lists(_mutation, min_size=1, max_size=4)):
        paths = _paths(cfg)
        path, node = paths[where % len(paths)]
        parent = _at(cfg, path[:-1]) if path else None
        if op == "set" and path:
            parent[path[-1]] = value
        elif op == "delete" and path:
            del parent[path[-1]]
        elif op == "add" and isinstance(node, dict):
            node[key] = value
        elif op == "wrap" and path:
            parent[path[-1]] = [parent[path[-1]]]
        elif op == "dup" and isinstance(node, list) and node:
            node.append(copy.deepcopy(node[where % len(node)]))
        elif isinstance(node, dict):
            node[key] = value
    return cfg


def _at(obj, path):
    for p in path:
        obj = obj[p]
    return obj


# ------------------------------------------------------------------ data corruptions

DATA_FILES = ("s_phot.ecsv", "s_spec.ecsv", "s_spec.csv", "s_spec_table.fits",
              "s_spec_image.fits")
_TOKENS = [b"nan", b"inf", b"-1", b"0", b"1e400", b"abc", b"", b",", b" ", b"#", b"\xff\xfe",
           b"---", b"%ECSV 1.0", b"bessell-V", b"bessell-V bessell-V", b"\x00", b"1e-300",
           b"-99", b"'", b'"', b"NAXIS1 = 0", b"CDELT1 = 0", b"END"]


@st.composite
def file_corruptions(draw):
    """(data file name, list of byte edits) for :func:`corrupt`."""
    name = draw(st.sampled_from(DATA_FILES))
    edits = draw(st.lists(st.tuples(
        st.sampled_from(["truncate", "flip", "insert", "delete", "token", "line_dup",
                         "line_drop", "zero"]),
        st.floats(min_value=0.0, max_value=1.0), st.integers(min_value=1, max_value=64),
        st.sampled_from(_TOKENS), st.binary(min_size=1, max_size=8)), min_size=1, max_size=3))
    return name, edits


def corrupt(data, edits):
    """Apply the byte edits of :func:`file_corruptions` to ``data``."""
    b = bytearray(data)
    for op, where, n, token, raw in edits:
        i = int(where * len(b)) if b else 0
        if op == "truncate":
            del b[i:]
        elif op == "flip" and b:
            for k in range(min(n, len(b) - i)):
                b[i + k] ^= raw[k % len(raw)] or 1
        elif op == "insert":
            b[i:i] = raw * (1 + n // 8)
        elif op == "delete":
            del b[i:i + n]
        elif op == "zero":
            b[i:i + n] = bytes(len(b[i:i + n]))
        elif op in ("token", "line_dup", "line_drop"):
            lines = bytes(b).split(b"\n")
            j = min(int(where * len(lines)), len(lines) - 1)
            if op == "line_dup":
                lines.insert(j, lines[j])
            elif op == "line_drop":
                del lines[j]
            else:
                words = lines[j].split(b" ")
                words[n % len(words)] = token
                lines[j] = b" ".join(words)
            b = bytearray(b"\n".join(lines))
    return bytes(b)


# ---------------------------------------------------------------------------- runners

class Hang(BaseException):
    """The per-case time limit was reached."""


@contextmanager
def time_limit(seconds):
    """Raise :class:`Hang` in the main thread after ``seconds`` (SIGALRM)."""
    def fire(signum, frame):
        raise Hang

    old = signal.signal(signal.SIGALRM, fire)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


def _outcome(fn, timeout):
    """("ok" | "refused" | "crash" | "hang", detail)."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            with time_limit(timeout):
                fn()
        return "ok", ""
    except TeffmcError as exc:
        msg = str(exc)
        if "\n" in msg.strip():
            return "crash", f"message on several lines: {msg!r}"
        return "refused", msg
    except Hang:
        return "hang", ""
    except Exception:  # noqa: BLE001 (the point: anything else is a bug)
        return "crash", traceback.format_exc(limit=-4)


def _toml(value):
    """A TOML text of a config dict (what a user would write), via teffmc's writer."""
    from teffmc.tomlout import dumps_toml

    return dumps_toml(value)


def run_config_case(folder, cfg, *, timeout=20.0):
    """Validate the mutated config the way ``teffmc fit`` does before it writes anything:
    TOML text -> load_config -> prepare (data read, parameter space, sampler settings)
    -> one log-posterior evaluation at prior draws."""
    path = Path(folder) / "case.toml"

    def go():
        try:
            text = _toml(cfg)
            tomllib.loads(text)
        except Exception:  # noqa: BLE001  (a value TOML cannot hold: test the dict itself)
            text = None
        from teffmc.config import load_config, parse_config
        from teffmc.run import prepare

        if text is None:
            c = parse_config(cfg, path)
        else:
            path.write_text(text, encoding="utf-8")
            c = load_config(path)
        prep = prepare(c, log=lambda m: None)
        x = prep.space.sample_prior(np.random.default_rng(0), 2)
        prep.log_post(x)

    return _outcome(go, timeout)


def run_data_case(folder, name, edits, *, timeout=20.0):
    """Read a corrupted data file with teffmc's reader for its kind."""
    from teffmc.observe import apply_masks, read_photometry, read_spectrum

    folder = Path(folder)
    src = folder / name
    bad = folder / f"bad_{name}"
    bad.write_bytes(corrupt(src.read_bytes(), edits))

    def go():
        if "phot" in name:
            read_photometry(bad)
        else:
            apply_masks(read_spectrum(bad), ranges=[(6000.0, 6010.0)])

    return _outcome(go, timeout)
