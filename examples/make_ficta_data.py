"""Make the data of the INVENTED demo star "Ficta" (not a real star) -- a worked example.

Ficta is an invented red supergiant seen at two epochs: "bright", and "faint" after it
cooled by 50 K and a veil of ~1 um dust grains formed in front of it. The spectra
(0.40-0.95 um, R = 1000) and BVRIJHKs photometry are simulated with teffmc's own
forward model plus noise and a small flux-calibration tilt; the true values are written
to truth.toml beside them.

    python examples/make_ficta_data.py ficta/      # writes the data and ficta.toml
    teffmc fit ficta/ficta.toml --out ficta-run    # fits both hypotheses and compares

`teffmc demo` does both steps in one go.
"""

import sys

from teffmc.demo import make_demo_data

if __name__ == "__main__":
    folder = sys.argv[1] if len(sys.argv) > 1 else "ficta"
    cfg = make_demo_data(folder)
    print(f"wrote the invented star's data and config: {cfg}")
