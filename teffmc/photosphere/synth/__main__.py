"""``python -m teffmc.photosphere.synth --out FILE [--workers N]``: build the grid."""

import argparse

from .build import build_grid


def main(argv=None):
    """Build the grid into ``--out`` and print its checksum (``argv``: the arguments)."""
    ap = argparse.ArgumentParser(prog="python -m teffmc.photosphere.synth",
                                 description="Compute teffmc's built-in photosphere grid.")
    ap.add_argument("--out", required=True, help="output HDF5 file")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--no-nuisance", action="store_true")
    a = ap.parse_args(argv)
    g = build_grid(a.out, workers=a.workers, progress=True, nuisance=not a.no_nuisance)
    print(f"checksum sha256:{g.checksum}")


if __name__ == "__main__":
    main()
