"""report.html and survey.html opened in a real headless Chromium driven by selenium
(acceptance 3): no console errors, every figure decoded, the parameter table equal to
summary.json, the survey table sorting on a click; a screenshot of each page is kept in
$TEFFMC_ARTEFACTS (else the test's temporary folder).

Chromium and its driver come from Debian's chromium and chromium-driver packages
(/usr/bin/chromium, /usr/bin/chromedriver), installed by tools/install --test; selenium is
in the test extra. These tests never skip.
"""

import json
import os
from pathlib import Path

import numpy as np
import pytest
from selenium import webdriver
from selenium.webdriver.chrome.service import Service
from selenium.webdriver.common.by import By

from small_star import small_star_config
from teffmc.batch import fit_many
from teffmc.config import ModelSpec
from teffmc.photosphere import load_grid
from teffmc.simulate import simulate_epoch

CHROMIUM, DRIVER = "/usr/bin/chromium", "/usr/bin/chromedriver"


@pytest.fixture(scope="module")
def browser():
    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for a in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
              "--window-size=1200,1600"):
        opts.add_argument(a)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    drv = webdriver.Chrome(service=Service(DRIVER), options=opts)
    drv.set_page_load_timeout(60)
    yield drv
    drv.quit()


def _artefacts(tmp_path):
    d = Path(os.environ.get("TEFFMC_ARTEFACTS") or tmp_path)
    d.mkdir(parents=True, exist_ok=True)
    return d


def _open(browser, path):
    browser.get(Path(path).resolve().as_uri())
    severe = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    assert severe == [], severe
    imgs = browser.find_elements(By.TAG_NAME, "img")
    assert imgs
    for img in imgs:
        ok = browser.execute_script(
            "return arguments[0].complete && arguments[0].naturalWidth > 0", img)
        assert ok, img.get_attribute("alt")
        assert img.get_attribute("src").startswith("data:image/png;base64,")  # no network
    return imgs


def _same(cell_value, number):
    if number is None:
        return cell_value == ""
    return float(cell_value) == float(number)


def test_run_report_in_chromium(browser, report_run, tmp_path):
    run = report_run / "veil"
    imgs = _open(browser, run / "report.html")
    assert {i.get_attribute("alt") for i in imgs} >= {"fit", "corner", "budget",
                                                       "delta_teff", "diagnostics"}
    summary = json.loads((run / "summary.json").read_text(encoding="utf-8"))
    # the verdict comes first, before the parameter table and the figures
    body = browser.find_element(By.TAG_NAME, "body").text
    verdict = "NOT CONVERGED" if not summary["converged"] else "Converged."
    assert body.index(verdict) < body.index("Parameters") < body.index("Figures")
    assert "How well the model fits" in body
    rows = browser.find_elements(By.CSS_SELECTOR, "#parameter-table tbody tr")
    expect = {**summary["parameters"], **summary["derived"]}
    assert [r.get_attribute("data-name") for r in rows] == list(expect)
    for r in rows:
        stats = expect[r.get_attribute("data-name")]
        for cell in r.find_elements(By.CSS_SELECTOR, "td[data-key]"):
            key = cell.get_attribute("data-key")
            assert _same(cell.get_attribute("data-value"), stats[key]), (key, stats[key])
            if stats[key] is not None and key in ("median", "p16", "p84"):
                assert float(cell.text) == pytest.approx(stats[key], rel=1e-5)
    for key, g in summary["goodness_of_fit"].items():
        assert f"{key} {g['n_points']} {g['chi2_nu']:.2f}" in body
    browser.save_screenshot(str(_artefacts(tmp_path) / "report.png"))


def test_comparison_report_in_chromium(browser, report_run, tmp_path):
    imgs = _open(browser, report_run / "report.html")
    assert "hypotheses" in {i.get_attribute("alt") for i in imgs}
    links = browser.find_elements(By.CSS_SELECTOR, "#comparison-table a")
    assert {a.text for a in links} == {"veil", "cooling"}
    browser.save_screenshot(str(_artefacts(tmp_path) / "comparison.png"))


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    """A batch of four invented stars: three fitted (one stops unconverged), one failed."""
    d = tmp_path_factory.mktemp("survey")
    grid = load_grid("blackbody")
    stars = {"s1": (4000.0, 0.5, 3000), "s2": (3600.0, 1.2, 3000), "s3": (4800.0, 0.2, 200)}
    for name, (teff, a_v, _) in stars.items():
        truth = {"teff": teff, "logg": 0.0, "mh": 0.0, "a_v": a_v, "r_v": 3.1, "theta": 2.0}
        simulate_epoch(d, name, grid, ModelSpec(), truth, resolution=100.0,
                       wave_range=(4500.0, 9000.0), rng=np.random.default_rng(1))
    configs = []
    for name, (_, _, steps) in stars.items():
        (d / f"{name}.toml").write_text(small_star_config(name, steps))
        configs.append(d / f"{name}.toml")
    (d / "s4.toml").write_text(small_star_config("nowhere", 3000))
    out = d / "batch"
    fit_many([*configs, d / "s4.toml"], out, workers=1, quiet=True)
    return out


def test_survey_in_chromium(browser, survey, tmp_path):
    from astropy.table import Table

    assert (survey / "survey.html").is_file()  # written by the batch itself
    _open(browser, survey / "survey.html")
    t = Table.read(survey / "batch.ecsv", format="ascii.ecsv")
    rows = browser.find_elements(By.CSS_SELECTOR, "#survey-table tbody tr")
    assert [r.get_attribute("data-star") for r in rows] == list(t["star"])
    status = {r.get_attribute("data-star"): r.find_elements(By.TAG_NAME, "td")[1].text
              for r in rows}
    assert status == dict(zip(t["star"], t["status"]))
    assert status["s3"] == "not_converged" and status["s4"] == "failed"
    for r in rows:
        cells = r.find_elements(By.CSS_SELECTOR, "td[data-key='teff']")
        star = r.get_attribute("data-star")
        row = t[list(t["star"]).index(star)]
        if cells and cells[0].get_attribute("data-value"):
            assert float(cells[0].get_attribute("data-value")) == float(row["teff_median"])
    # the link of a fitted star opens its own report
    link = rows[0].find_element(By.TAG_NAME, "a").get_attribute("href")
    assert link.endswith("s1/report.html")
    # sort by Teff: one click ascending, a second descending
    head = [h for h in browser.find_elements(By.CSS_SELECTOR, "#survey-table th")
            if h.text.startswith("T_eff") or h.text.startswith("Teff")][0]

    def teffs():
        out = []
        for r in browser.find_elements(By.CSS_SELECTOR, "#survey-table tbody tr"):
            v = r.find_element(By.CSS_SELECTOR, "td[data-key='teff']").get_attribute(
                "data-value")
            out.append(float(v) if v else None)
        return out

    head.click()
    up = teffs()
    nums = [v for v in up if v is not None]
    assert nums == sorted(nums) and len(nums) == 3 and up[-1] is None
    head.click()
    down = [v for v in teffs() if v is not None]
    assert down == sorted(nums, reverse=True)
    browser.save_screenshot(str(_artefacts(tmp_path) / "survey.png"))


def test_survey_latex_table_compiles(survey, tmp_path):
    """survey.tex (one row per fitted star) through a real pdflatex; its values are the
    batch table's, rounded by the paper tables' rule (tests/test_latex_tables.py)."""
    import subprocess

    from astropy.table import Table

    from teffmc.report.latex import round_value

    tex = (survey / "survey.tex").read_text(encoding="utf-8")
    (tmp_path / "doc.tex").write_text(
        r"\documentclass{article}\begin{document}" + tex + r"\end{document}",
        encoding="utf-8")
    r = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
                       cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stdout[-3000:]
    t = Table.read(survey / "batch.ecsv", format="ascii.ecsv")
    for row in t:
        if row["status"] == "failed":
            assert f"{row['star']} &" not in tex
            continue
        med, lo, hi = (float(row[f"teff_{k}"]) for k in ("median", "p16", "p84"))
        assert round_value(med, hi - med, med - lo).text in tex


def test_survey_figures_are_journal_ready(survey):
    """The survey's summary plots get the checks of every other figure
    (tests/test_report_output.py): no overlapping text, units, column width."""
    import matplotlib.pyplot as plt

    from teffmc.report import style
    from teffmc.report import survey as survey_mod
    from test_report_output import _axis_labels_ok

    rows, names = survey_mod.survey_rows(survey)
    checked = []  # each figure checked where survey_figures turns it into PNG
    png = survey_mod._png

    def check(fig):
        checked.append((fig.get_figwidth(), style.text_overlaps(fig), _axis_labels_ok(fig)))
        return png(fig)

    try:
        survey_mod._png = check
        images = survey_mod.survey_figures(rows, names)
    finally:
        survey_mod._png = png
    assert set(images) == {"teff_hist", "teff_av"}
    assert checked == [(style.COLUMN, [], [])] * 2
    plt.close("all")
