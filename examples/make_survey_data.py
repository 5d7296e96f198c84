"""Make a small survey of INVENTED stars (not real stars) -- a worked example of `teffmc batch`.

Each star gets BVRIJHKs photometry, a 6000-7500 A spectrum at R = 1000 and a config file
whose first lines record the true values (see teffmc.simulate.simulate_survey).

    python examples/make_survey_data.py survey-stars 6      # 6 stars + survey.txt
    teffmc batch --list survey-stars/survey.txt --out survey --workers 2
    # survey/batch.ecsv: one row per star; compare teff_median with the truth comments

Re-running the `teffmc batch` command skips finished stars and resumes interrupted ones.
"""

import sys
from pathlib import Path

from teffmc.simulate import simulate_survey

if __name__ == "__main__":
    folder = Path(sys.argv[1] if len(sys.argv) > 1 else "survey-stars")
    n = int(sys.argv[2]) if len(sys.argv) > 2 else 6
    configs = simulate_survey(folder, n)
    (folder / "survey.txt").write_text("".join(f"{c.name}\n" for c in configs), encoding="utf-8")
    print(f"wrote {n} invented stars and {folder / 'survey.txt'}")
