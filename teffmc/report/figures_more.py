"""Figures beyond corner and fit.

Hypotheses overlaid, the dimming budget, epoch differences (Delta Teff) and the
convergence diagnostics (rank plots, tau against chain length, Pareto k). Each builder
returns a Figure (see :mod:`teffmc.report.style`).
"""

import json
import re

import numpy as np

from .. import posterior as post_mod
from . import style
from .figures import _head, corner_order, fit_fig, panels_from_posterior, param_label
from .style import COLUMN, PAGE, SERIES, plain_text, unit_label

__all__ = ["hypotheses_fig", "budget_fig", "delta_teff_fig", "diagnostics_fig",
           "tau_history", "later_epochs", "BUDGET_PARTS"]

#: the dimming budget's parts (teffmc.budget), in its order, with their plot names
BUDGET_PARTS = (("delta_v", "total ΔV"), ("dv_temperature", "temperature"),
                ("dv_veil", "veil"), ("dv_radius", "radius"))
K_WARN = 0.7  # Pareto k above which PSIS is unreliable (Vehtari, Gelman & Gabry 2017)


def later_epochs(dt):
    """Epoch labels with a budget against the reference epoch (``delta_v@<label>``)."""
    return [n.partition("@")[2] for n in json.loads(dt.attrs.get("derived_names", "[]"))
            if n.startswith("delta_v@")]


@style.styled
def hypotheses_fig(runs, *, title=None):
    """Every data set with each hypothesis's model overlaid. ``runs``: [(name, dt)]."""
    per_run = [panels_from_posterior(dt) for _, dt in runs]
    panels = per_run[0]
    models = [[(name, pans[i]["draws"]) for (name, _), pans in zip(runs, per_run)]
              for i in range(len(panels))]
    return fit_fig(panels, title=title, models=models)


def _interval_row(ax, y, x, color, marker):
    lo2, lo, med, hi, hi2 = np.percentile(x, [2.5, 16, 50, 84, 97.5])
    ax.plot([lo2, hi2], [y, y], color=color, lw=0.8)
    ax.plot([lo, hi], [y, y], color=color, lw=2.5, solid_capstyle="butt")
    ax.plot([med], [y], marker, color=color, mfc="white", ms=4)


@style.styled
def budget_fig(runs, *, title=None, converged=True):
    """Draw the dimming budget: Delta V between epochs and its parts.

    The temperature / veil / radius parts in teffmc.budget's telescoping order, median
    with 68 % (thick) and 95 % (thin) intervals, one colour per hypothesis.
    ``runs``: [(name, dt)].
    """
    epochs = later_epochs(runs[0][1])
    n = len(BUDGET_PARTS)
    fig = style.figure(COLUMN, 0.9 + 0.75 * n * max(len(epochs), 1))
    axes = fig.subplots(max(len(epochs), 1), 1, squeeze=False)[:, 0]
    markers = "osD^v<>"
    for ax, ep in zip(axes, epochs):
        for h, (name, dt) in enumerate(runs):
            off = (h - (len(runs) - 1) / 2) * 0.8 / max(len(runs), 1)
            for k, (part, _) in enumerate(BUDGET_PARTS):
                var = f"{part}@{ep}"
                if var in dt["posterior"].ds:
                    _interval_row(ax, n - 1 - k + off, post_mod.draws(dt, var),
                                  SERIES[h % len(SERIES)], markers[h % len(markers)])
            ax.plot([], [], markers[h % len(markers)], color=SERIES[h % len(SERIES)],
                    mfc="white", label=name)
        ax.axvline(0, color="0.5", lw=0.5)
        ax.set_yticks(range(n))
        ax.set_yticklabels([lab for _, lab in BUDGET_PARTS][::-1])
        ax.set_ylabel(unit_label("part of the dimming", ""))
        ax.set_ylim(-0.6, n - 0.4)
        ax.set_xlabel(unit_label(f"ΔV ({ep} − reference)", "mag"))
        plain_text(ax.set_title(f"epoch {ep}", loc="left"))
        if len(runs) > 1:
            for t in ax.legend(loc="best", frameon=False, title="hypothesis").get_texts():
                plain_text(t)
    _head(fig, title, converged)
    return fig


@style.styled
def delta_teff_fig(runs, *, title=None, converged=True):
    """Posterior of Delta Teff = Teff(epoch) - Teff(reference), per hypothesis."""
    epochs = later_epochs(runs[0][1]) or [
        n.partition("@")[2] for n in json.loads(runs[0][1].attrs.get("derived_names", "[]"))
        if n.startswith("delta_teff@")]
    fig = style.figure(COLUMN, 0.9 + 1.8 * max(len(epochs), 1))
    axes = fig.subplots(max(len(epochs), 1), 1, squeeze=False)[:, 0]
    for ax, ep in zip(axes, epochs):
        for h, (name, dt) in enumerate(runs):
            var = f"delta_teff@{ep}"
            if var not in dt["posterior"].ds:
                continue
            x = post_mod.draws(dt, var)
            ax.hist(x, bins=40, density=True, histtype="step", color=SERIES[h % len(SERIES)],
                    ls=["-", "--", ":", "-."][h % 4], label=name)
        ax.axvline(0, color="0.5", lw=0.5)
        ax.set_xlabel(unit_label(rf"$\Delta T_\mathrm{{eff}}$ ({ep} − reference)", "K"))
        ax.set_ylabel(unit_label("posterior density", "K$^{-1}$"))
        if len(runs) > 1:
            for t in ax.legend(loc="best", frameon=False).get_texts():
                plain_text(t)
    _head(fig, title, converged)
    return fig


_TAU_LINE = re.compile(r"\] (\d+) steps, ([\d.]+) x max tau = \d+ \(tau ([\d.]+) for (\S+)\)")


def tau_history(log_text):
    """Return ``(steps, max tau, tau_factor)`` from the stop-rule lines of a run's log.txt.

    These are the estimates the stop rule saw at each check.
    """
    steps, taus, factor = [], [], None
    for m in _TAU_LINE.finditer(log_text or ""):
        steps.append(int(m.group(1)))
        taus.append(float(m.group(3)))
        factor = float(m.group(2))
    return np.array(steps), np.array(taus), factor


def _rank_panel(ax, chains, name, n_groups=4):
    """Draw a rank plot (Vehtari et al. 2021, from memory) on ``ax``.

    Ranks of all draws pooled, a histogram per group of walkers; flat histograms mean the
    groups agree.
    """
    n_w = chains.shape[0]
    ranks = np.argsort(np.argsort(chains.ravel(), kind="stable"), kind="stable")
    ranks = ranks.reshape(chains.shape)
    groups = np.array_split(np.arange(n_w), min(n_groups, n_w))
    bins = np.linspace(0, ranks.size, 11)
    for g, idx in enumerate(groups):
        counts, _ = np.histogram(ranks[idx].ravel(), bins=bins)
        ax.stairs(counts, bins, baseline=None, color=SERIES[g % len(SERIES)])
    ax.axhline(ranks.size / len(groups) / 10, color="0.4", lw=0.6, ls="--")
    ax.set_yticks([])
    ax.set_xticks([])
    ax.set_title(param_label(name), fontsize=6)


@style.styled
def diagnostics_fig(dt, summary, log_text, *, title=None):
    """Draw convergence at a glance.

    Rank plots of up to 8 parameters (walkers in 4 groups), the stop rule's tau estimates
    against chain length with the required length ``N / tau_factor``, and the Pareto k of
    every data point's PSIS-LOO term.
    """
    names = corner_order(json.loads(dt.attrs["sampled_names"]))
    names = [n for n in names if np.ptp(dt["posterior"].ds[n].values) > 0]
    ncol = 4
    nrow = -(-len(names) // ncol)
    fig = style.figure(PAGE, 1.25 * nrow + 2.6)
    gs = fig.add_gridspec(nrow + 1, ncol, height_ratios=[1] * nrow + [2.2])
    for i, n in enumerate(names):
        ax = fig.add_subplot(gs[i // ncol, i % ncol])
        _rank_panel(ax, dt["posterior"].ds[n].values, n)
        if i % ncol == 0:
            ax.set_ylabel(unit_label("draws per bin", ""))
        if i // ncol == nrow - 1 or i + ncol >= len(names):
            ax.set_xlabel(unit_label("rank", ""))
    tax = fig.add_subplot(gs[nrow, :2])
    steps, taus, factor = tau_history(log_text)
    if steps.size:
        tax.plot(steps, taus, "o-", color=SERIES[0], ms=3, label="max τ (stop-rule checks)")
        tax.plot(steps, steps / factor, "--", color=SERIES[1], label=f"N / {factor:g}")
        tax.axvline(summary.get("burn", 0), color="0.5", lw=0.6, ls=":", label="burn-in")
        tax.legend(loc="upper left", frameon=False)
    from matplotlib.ticker import MaxNLocator

    tax.xaxis.set_major_locator(MaxNLocator(4))
    tax.set_xlabel(unit_label("chain length N", "steps"))
    tax.set_ylabel(unit_label("τ", "steps"))
    kax = fig.add_subplot(gs[nrow, 2:])
    _pareto_panel(kax, dt)
    _head(fig, title, bool(summary.get("converged")))
    return fig


def _pareto_panel(ax, dt):
    _, _, _, k = post_mod.loo(dt)
    ll = dt["log_likelihood"].ds
    start = 0
    for i, v in enumerate(ll.data_vars):
        size = int(np.prod(ll[v].shape[2:]))
        ax.plot(np.arange(start, start + size), k[start:start + size], ".",
                color=SERIES[i % len(SERIES)], ms=2, label=str(v), rasterized=True)
        start += size
    ax.axhline(K_WARN, color="0.3", lw=0.6, ls="--")
    ax.set_xlabel(unit_label("data point", ""))
    ax.set_ylabel(unit_label("Pareto $\\hat{k}$", ""))
    ax.legend(loc="best", frameon=False, markerscale=3, fontsize=6)
