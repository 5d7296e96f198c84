"""The comparison figure: shared-parameter posteriors overlaid, and each fit."""

import json

import numpy as np

from .figures import _label, _plt, gapped, plain_text

__all__ = ["compare_figure"]


def compare_figure(runs, path, max_params=4):
    """``runs``: list of (name, DataTree, summary)."""
    from ..rereport import panels_from_posterior

    plt = _plt()
    names = [set(json.loads(dt.attrs["sampled_names"])) for _, dt, _ in runs]
    shared = [n for n in json.loads(runs[0][1].attrs["sampled_names"])
              if all(n in s for s in names)][:max_params]
    # show the data set on which the hypotheses' fits differ most (chi^2 spread)
    all_panels = [panels_from_posterior(dt) for _, dt, _ in runs]

    def chi2(p):
        return float(np.sum(((p["data"] - np.median(p["draws"], axis=0)) / p["err"]) ** 2))

    spread = [np.ptp([chi2(pans[i]) for pans in all_panels])
              for i in range(len(all_panels[0]))]
    pick = int(np.argmax(spread))
    panels = [pans[pick] for pans in all_panels]
    ncol = max(len(shared), 1)
    nrow = 1 + 2 * len(runs)
    fig = plt.figure(figsize=(3.0 * max(ncol, 3), 2.6 + 3.2 * len(runs)))
    gs = fig.add_gridspec(nrow, ncol, height_ratios=[2.2] + [2.4, 1.0] * len(runs))
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for j, par in enumerate(shared):
        ax = fig.add_subplot(gs[0, j])
        for c, (name, dt, _) in zip(colors, runs):
            x = dt["posterior"].ds[par].values.ravel()
            ax.hist(x, bins=40, density=True, histtype="step", color=c, label=name)
        ax.set_xlabel(_label(par))
        ax.set_yticks([])
    if shared:  # run names are folder names: drawn as typed, never as mathtext
        for t in fig.axes[0].legend(fontsize=7).get_texts():
            plain_text(t)
    for i, ((name, _, summ), pan) in enumerate(zip(runs, panels)):
        ax = fig.add_subplot(gs[1 + 2 * i, :])
        rax = fig.add_subplot(gs[2 + 2 * i, :], sharex=ax)
        c = colors[i % len(colors)]
        med = np.median(pan["draws"], axis=0)
        x, data, err, med = gapped(np.asarray(pan["x"]) / 1e4, pan["data"], pan["err"], med)
        style = "-" if pan["kind"] == "spectrum" else "o"
        ax.plot(x, data, style, color="0.25", lw=0.6, ms=3, label="data")
        ax.plot(x, med, style, color=c, lw=0.8, ms=3, mfc="none", label=f"{name}: model")
        rax.plot(x, (data - med) / err, style, color=c, lw=0.5, ms=3)
        rax.axhline(0, color="0.5", lw=0.5)
        plain_text(ax.set_title(f"{name}: {pan['label']}" + (
            "" if summ["converged"] else "  (NOT CONVERGED)"), fontsize=9))
        for t in ax.legend(fontsize=7).get_texts():
            plain_text(t)
        rax.set_ylabel("resid/σ", fontsize=8)
        rax.set_xlabel("wavelength [µm]")
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)
