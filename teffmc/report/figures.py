"""The run's figures, journal-ready (see :mod:`teffmc.report.style`): corner and fit.

The fit comes with residuals; ``corner_figure``/``fit_figure`` are the old single-file
entry points.

Builders (``*_fig``) return a matplotlib Figure; :func:`teffmc.report.style.save` writes
it as PDF and PNG. The other figures (hypotheses, budget, Delta Teff, diagnostics) are in
:mod:`teffmc.report.figures_more`.
"""

import json
import math
from pathlib import Path

import numpy as np

from ..parameters import CORNER_RANK, LABELS, UNITS
from . import style
from .style import CAUTION, COLUMN, PAGE, plain_text, unit_label

__all__ = ["corner_figure", "fit_figure", "corner_fig", "fit_fig", "CAUTION", "gapped",
           "param_label", "plain_text", "CORNER_MAX", "masked_gaps", "DERIVED_LABELS",
           "panels_from_posterior"]

#: at most this many parameters in the corner plot (readable at page width); the rest
#: are in the table and the diagnostics
CORNER_MAX = 8
#: plot labels and units of derived quantities (units as in teffmc.derived / budget)
DERIVED_LABELS = {"f_bol": (r"$f_\mathrm{bol}$", "W m^-2"), "radius": (r"$R$", "R_sun"),
                  "luminosity": (r"$L$", "L_sun"), "v_mag": (r"$V$", "mag"),
                  "delta_teff": (r"$\Delta T_\mathrm{eff}$", "K"),
                  "delta_v": (r"$\Delta V$", "mag"), "distance_pc": ("$d$", "pc")}


def gapped(x, *ys):
    """Insert NaN where masked pixels leave a gap, so lines are not drawn across it."""
    x = np.asarray(x, float)
    if x.size < 3:
        return (x, *ys)
    cut = _cuts(x)
    out = [np.insert(x, cut, np.nan)]
    for y in ys:
        y = np.asarray(y, float)
        out.append(np.insert(y, cut, np.nan, axis=-1))
    return tuple(out)


def _cuts(x):
    step = np.diff(x)
    return np.flatnonzero(step > 5 * np.median(step)) + 1


def masked_gaps(x):
    """Return ``[(lo, hi)]``, the wavelength ranges between used pixels > 5 median steps.

    These are the masked ranges, as the fitted pixels show them.
    """
    x = np.asarray(x, float)
    if x.size < 3:
        return []
    return [(x[i - 1], x[i]) for i in _cuts(x)]


def param_label(name):
    """Axis label of a summary name: symbol, epoch in parentheses, unit in brackets."""
    base, _, ep = name.partition("@")
    if base in DERIVED_LABELS:
        sym, unit = DERIVED_LABELS[base]
    else:
        sym = LABELS.get(base, base).split(" [")[0]
        unit = UNITS.get(base, "")
    return unit_label(f"{sym} ({ep})" if ep else sym, unit)


def _head(fig, title, converged):
    """Write the figure's title and, for a run that did not converge, the caution in red.

    The title is the star's name, wrapped to the figure's width.
    """
    import textwrap

    # about 10 characters of 9 pt text per inch, with room to spare
    lines = [textwrap.fill(t, int(10 * fig.get_figwidth()))
             for t in (title.split("\n") if title else []) + ([] if converged else [CAUTION])]
    head = "\n".join(lines)
    if head:
        plain_text(fig.suptitle(head, color="black" if converged else "#D55E00"))


def corner_order(names):
    """Return up to CORNER_MAX names, in the order the components declare.

    By each parameter's ``corner_rank`` (:data:`teffmc.parameters.CORNER_RANK`: the
    physical parameters; the epochs of one, ``name@label``, side by side), then the
    others in the order of ``names``.
    """
    def rank(n):
        return CORNER_RANK.get(n.partition("@")[0], math.inf)
    return sorted(names, key=lambda n: (rank(n), names.index(n)))[:CORNER_MAX]


@style.styled
def corner_fig(samples, names, *, truths=None, converged=True, title=None):
    """Draw the corner plot of up to :data:`CORNER_MAX` parameters.

    Marginal histograms and 39 % / 86 % (1 and 2 sigma of a 2-D normal) highest-density
    contours of the pairs.
    """
    from matplotlib.ticker import MaxNLocator, NullLocator

    samples = np.asarray(samples, float)
    keep = [i for i in range(samples.shape[1]) if np.ptp(samples[:, i]) > 0]
    order = corner_order([names[i] for i in keep])
    cols = [names.index(n) for n in order]
    k = len(cols)
    width = COLUMN if k <= 3 else PAGE
    fig = style.figure(width, width if k > 1 else 0.8 * width)
    axes = fig.subplots(k, k, squeeze=False)
    lims = [np.percentile(samples[:, c], [0.5, 99.5]) for c in cols]
    for i, ci in enumerate(cols):
        for j, cj in enumerate(cols):
            ax = axes[i, j]
            if j > i:
                ax.set_visible(False)
                continue
            if i == j:
                ax.hist(samples[:, ci], bins=30, range=lims[i], histtype="step",
                        color=style.SERIES[0])
                for q in np.percentile(samples[:, ci], [16, 50, 84]):
                    ax.axvline(q, color="0.4", lw=0.6, ls="--")
            else:
                _contour(ax, samples[:, cj], samples[:, ci], lims[j], lims[i])
                ax.set_ylim(lims[i])
            ax.set_xlim(lims[j])
            if truths is not None and truths.get(names[cj]) is not None:
                ax.axvline(truths[names[cj]], color=style.MODEL, lw=0.8)
            ax.xaxis.set_major_locator(MaxNLocator(2 if k > 4 else 3, prune="both"))
            ax.yaxis.set_major_locator(MaxNLocator(2 if k > 4 else 3, prune="both"))
            ax.tick_params(labelsize=6)
            if i == j:
                ax.yaxis.set_major_locator(NullLocator())
            if i == k - 1:
                ax.set_xlabel(param_label(names[cj]))
            else:
                ax.set_xticklabels([])
            if j == 0 and i > 0:
                ax.set_ylabel(param_label(names[ci]))
            elif i != j:
                ax.set_yticklabels([])
    _head(fig, title, converged)
    return fig


def _contour(ax, x, y, xr, yr):
    h, xe, ye = np.histogram2d(x, y, bins=25, range=[xr, yr])
    flat = np.sort(h.ravel())[::-1]
    cum = np.cumsum(flat) / max(flat.sum(), 1)
    levels = sorted({float(flat[min(np.searchsorted(cum, m), flat.size - 1)])
                     for m in (0.865, 0.393)})
    ax.plot(x[:: max(1, x.size // 1500)], y[:: max(1, y.size // 1500)], ",",
            color="0.6", alpha=0.5, rasterized=True)
    if len(levels) == 2 and levels[0] < levels[1] and levels[0] > 0:
        xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
        ax.contour(xc, yc, h.T, levels=levels, colors=[style.SERIES[0]], linewidths=0.7)


UNIT_FLUX = "erg s$^{-1}$ cm$^{-2}$ Å$^{-1}$"
WAVE = "wavelength [µm]"
RESID = "residual [σ]"


def _layout(panels):
    """Rows = epochs (in order of appearance), columns = that epoch's data sets."""
    rows = {}
    for p in panels:
        rows.setdefault(p["label"].split(":")[0], []).append(p)
    return list(rows.values())


def _grid(fig, rows):
    ncol = max(len(r) for r in rows)
    widths = [5 if (rows[0][c]["kind"] if c < len(rows[0]) else "") == "spectrum" else 3
              for c in range(ncol)]
    outer = fig.add_gridspec(len(rows), ncol, width_ratios=widths)
    pairs = []
    for r, row in enumerate(rows):
        for c, pan in enumerate(row):
            inner = outer[r, c].subgridspec(2, 1, height_ratios=[3, 1], hspace=0.0)
            ax = fig.add_subplot(inner[0])
            rax = fig.add_subplot(inner[1], sharex=ax)
            pairs.append((pan, ax, rax))
    return pairs


def _shade(ax, rax, x):
    for lo, hi in masked_gaps(x):
        for a in (ax, rax):
            a.axvspan(lo, hi, color=style.MASK, lw=0, zorder=0)


def _spectrum(pan, ax, rax, models):
    x = np.asarray(pan["x"], float) / 1e4
    _shade(ax, rax, x)
    scale = _flux_scale(pan["data"])
    um, d, e = gapped(x, np.asarray(pan["data"]) / scale, np.asarray(pan["err"]) / scale)
    ax.plot(um, d, color=style.DATA, lw=0.5, label="data")
    for lab, color, ls, dr in models:
        lo, med, hi = np.percentile(dr, [16, 50, 84], axis=0) / scale
        _, lo, med, hi = gapped(x, lo, med, hi)
        if len(models) == 1:
            ax.fill_between(um, lo, hi, color=style.DRAWS, alpha=0.5, lw=0,
                            label="model 16–84 %")
        ax.plot(um, med, color=color, ls=ls, lw=0.7, label=lab)
        rax.plot(um, (d - med) / e, color=color, ls=ls, lw=0.4)
    exp = int(round(np.log10(scale)))
    ax.set_ylabel(f"$F_\\lambda$ [10$^{{{exp}}}$\n{UNIT_FLUX}]" if exp else
                  f"$F_\\lambda$\n[{UNIT_FLUX}]")


def _flux_scale(data):
    """Return a power of ten near the data's median, for the axis label.

    It is written into the label, so there is no offset text above the axis.
    """
    med = float(np.nanmedian(np.abs(np.asarray(data, float))))
    return 10.0 ** np.floor(np.log10(med)) if med > 0 and np.isfinite(med) else 1.0


def _photometry(pan, ax, rax, models):
    um = np.asarray(pan["x"], float) / 1e4
    d, e = np.asarray(pan["data"], float), np.asarray(pan["err"], float)
    ax.errorbar(um, d, yerr=e, fmt="o", color=style.DATA, ms=3, label="data", zorder=3)
    for k, (lab, color, _, dr) in enumerate(models):
        med = np.median(dr, axis=0)
        lo, hi = np.percentile(dr, [16, 84], axis=0)
        shift = 1.0 + 0.02 * (k - (len(models) - 1) / 2)
        ax.errorbar(um * shift, med, yerr=[med - lo, hi - med], fmt="s", mfc="none",
                    color=color, ms=3, label=lab)
        rax.plot(um * shift, (d - med) / e, "s", mfc="none", color=color, ms=3)
    ax.set_xscale("log")
    ax.margins(y=0.15)
    ax.invert_yaxis()
    ax.set_ylabel("magnitude [mag]")
    from matplotlib.ticker import NullFormatter, ScalarFormatter
    fmt = ScalarFormatter()
    fmt.set_scientific(False)
    rax.xaxis.set_major_formatter(fmt)
    rax.xaxis.set_minor_formatter(NullFormatter())
    rax.set_xticks([t for t in (0.3, 0.5, 1, 2, 3, 5, 10) if um.min() / 1.3 < t < um.max() * 1.3])
    span = np.log10(um.max() / um.min()) if um.size > 1 else 1.0
    ax.set_xlim(um.min() / 10 ** (0.08 * span + 0.02), um.max() * 10 ** (0.08 * span + 0.02))
    _band_names(ax, um, d, pan.get("bands", []))


def _band_names(ax, um, d, bands):
    """Band names under the points, shortened ("bessell-V" -> "V")."""
    for xi, yi, b in sorted(zip(um, d, bands)):
        name = str(b).split("-")[-1]
        plain_text(ax.annotate(name, (xi, yi), textcoords="offset points",
                               xytext=(0, -11), ha="center",
                               fontsize=6, color="0.3"))


@style.styled
def fit_fig(panels, *, converged=True, title=None, models=None):
    """Draw data, model and normalised residuals: one pair of axes per data set.

    Epochs in rows; masked ranges are shaded. ``models`` (hypotheses overlaid) maps each
    panel's ``key``/index to ``[(label, draws)]``; by default the panel's own ``draws``.
    """
    from matplotlib.ticker import MaxNLocator

    rows = _layout(panels)
    fig = style.figure(PAGE, 2.8 * len(rows) + 0.4)
    for idx, (pan, ax, rax) in enumerate(_grid(fig, rows)):
        own = [("model (median)", pan["draws"])] if models is None else models[idx]
        series = [(lab, style.MODEL if models is None else style.SERIES[k % 6],
                   ["-", "--", ":", "-."][k % 4], np.asarray(dr, float))
                  for k, (lab, dr) in enumerate(own)]
        (_spectrum if pan["kind"] == "spectrum" else _photometry)(pan, ax, rax, series)
        plain_text(ax.set_title(pan["label"], loc="left", fontsize=7))
        rax.axhline(0, color="0.4", lw=0.5)
        rax.yaxis.set_major_locator(MaxNLocator(3, symmetric=True))
        rax.set_ylabel(RESID)
        rax.set_xlabel(WAVE)
        ax.tick_params(axis="x", labelbottom=False)
        if pan is panels[0] or models is not None and idx == 0:
            for t in ax.legend(loc="best", frameon=False).get_texts():
                plain_text(t)
    _head(fig, title, converged)
    return fig


def panels_from_posterior(dt):
    """Figure panels (see :func:`fit_fig`) rebuilt from a run's DataTree."""
    panels = []
    for ch in json.loads(dt.attrs["channels"]):
        key = ch["key"]
        pred = dt["posterior_predictive"].ds[key].values
        panels.append({"kind": ch["kind"], "label": ch["label"], "bands": ch["bands"],
                       "key": key, "data": dt["observed_data"].ds[key].values,
                       "x": dt["constant_data"].ds[f"{key}__x"].values,
                       "err": dt["constant_data"].ds[f"{key}__err"].values,
                       "draws": pred.reshape(-1, pred.shape[-1])})
    return panels


def _save_one(fig, path, converged):
    path = Path(path)
    style.save(fig, path.with_suffix(""), [path.suffix.lstrip(".") or "png"],
               converged=converged)


def corner_figure(samples, names, path, *, truths=None, converged=True, title=None):
    """Corner plot saved to ``path`` (its suffix chooses the format)."""
    _save_one(corner_fig(samples, names, truths=truths, converged=converged, title=title),
              path, converged)


def fit_figure(panels, path, *, converged=True, title=None):
    """Save data, model and residuals to ``path`` (see :func:`fit_fig`)."""
    _save_one(fit_fig(panels, converged=converged, title=title), path, converged)
