"""The small star of the batch and survey tests (an INVENTED star's config).

Blackbody grid, a short R = 100 spectrum and 7 bands, Teff and A_V free: a converged run
takes a few seconds. With max_steps = 200 the stop rule cannot pass (it needs two tau
estimates), so the run is reported as not converged.
"""

import textwrap


def small_star_config(data, max_steps):
    """Config text of a star whose files are ``{data}_phot.ecsv`` and ``{data}_spec.ecsv``."""
    return textwrap.dedent(f"""\
        grid = "blackbody"
        [[epoch]]
        photometry = "{data}_phot.ecsv"
        spectra = [{{ file = "{data}_spec.ecsv", resolution = 100.0, mismatch = "none" }}]
        [priors]
        teff = {{ dist = "uniform", low = 3000, high = 6000 }}
        logg = {{ fixed = 0.0 }}
        mh = {{ fixed = 0.0 }}
        theta = {{ fixed = 2.0 }}
        [sampler]
        n_walkers = 16
        max_steps = {max_steps}
        min_steps = 200
        check_every = 200
        n_starts = 4
        seed = 2
        """)
