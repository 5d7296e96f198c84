"""Corner plot and data-versus-model figure with residuals."""

import numpy as np

from ..parameters import LABELS

__all__ = ["corner_figure", "fit_figure", "CAUTION"]

CAUTION = "NOT CONVERGED: do not quote these numbers"


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def gapped(x, *ys):
    """Insert NaN where masked pixels leave a gap, so lines are not drawn across it."""
    x = np.asarray(x, float)
    if x.size < 3:
        return (x, *ys)
    step = np.diff(x)
    cut = np.flatnonzero(step > 5 * np.median(step)) + 1
    out = [np.insert(x, cut, np.nan)]
    for y in ys:
        y = np.asarray(y, float)
        out.append(np.insert(y, cut, np.nan, axis=-1))
    return tuple(out)


def _meta(converged):
    """PNG text chunks: lets scripts (and tests) see the caution without reading pixels."""
    return {"Software": "teffmc", "Description": "converged" if converged else CAUTION}


def plain_text(text):
    """Draw a matplotlib Text as typed, neither mathtext nor TeX: for user-given names
    (a star called "$\\frac{a" would otherwise fail to parse when the figure is drawn)."""
    text.set_usetex(False)
    text.set_parse_math(False)
    return text


def _label(name):
    base, _, ep = name.partition("@")
    lab = LABELS.get(base, base)
    return f"{lab} ({ep})" if ep else lab


def corner_figure(samples, names, path, *, truths=None, converged=True, title=None):
    """Corner plot of the sampled parameters, saved to ``path``."""
    plt = _plt()
    import corner

    samples = np.asarray(samples)
    keep = [i for i in range(samples.shape[1]) if np.ptp(samples[:, i]) > 0]
    fig = corner.corner(samples[:, keep], labels=[_label(names[i]) for i in keep],
                        quantiles=[0.16, 0.5, 0.84], show_titles=True, title_fmt=".3g",
                        truths=None if truths is None else [truths.get(names[i]) for i in keep],
                        truth_color="tab:red")
    head = title or ""
    if not converged:
        head = f"{head}\n{CAUTION}" if head else CAUTION
    if head:
        plain_text(fig.suptitle(head, color="black" if converged else "red", fontsize=12))
    fig.savefig(path, dpi=90, metadata=_meta(converged))
    plt.close(fig)


def fit_figure(panels, path, *, converged=True, title=None):
    """Data, posterior model draws and normalised residuals, one row per data set.

    Parameters
    ----------
    panels : list of dict
        Each with ``kind`` ("spectrum" or "photometry"), ``label``, ``x`` (wavelength
        [Angstrom] or band effective wavelength), ``data``, ``err``, ``draws``
        (n_draws, n_points) of model predictions and, for photometry, ``bands``.
    """
    plt = _plt()
    n = len(panels)
    fig, axes = plt.subplots(2 * n, 1, figsize=(9, 3.6 * n),
                             gridspec_kw={"height_ratios": [3, 1] * n}, squeeze=False)
    for k, pan in enumerate(panels):
        ax, rax = axes[2 * k, 0], axes[2 * k + 1, 0]
        x, d, e, dr = (np.asarray(pan[key]) for key in ("x", "data", "err", "draws"))
        med = np.median(dr, axis=0)
        if pan["kind"] == "spectrum":
            um, d, e, med, dr = gapped(x / 1e4, d, e, med, dr[: min(len(dr), 30)])
            ax.plot(um, d, color="0.2", lw=0.6, label="data")
            for row in dr:
                ax.plot(um, row, color="tab:orange", lw=0.4, alpha=0.15)
            ax.plot(um, med, color="tab:red", lw=0.8, label="posterior median model")
            ax.set_ylabel(r"$F_\lambda$ [erg s$^{-1}$ cm$^{-2}$ Å$^{-1}$]")
            rax.plot(um, (d - med) / e, color="0.3", lw=0.5)
        else:
            um = x / 1e4
            ax.errorbar(um, d, yerr=e, fmt="o", color="0.2", label="data", ms=4)
            ax.plot(um, med, "s", mfc="none", color="tab:red", label="posterior median model")
            for xi, lo, hi in zip(um, *np.percentile(dr, [16, 84], axis=0)):
                ax.plot([xi, xi], [lo, hi], color="tab:orange", lw=3, alpha=0.5)
            for xi, yi, b in zip(um, d, pan["bands"]):
                ax.annotate(b, (xi, yi), textcoords="offset points", xytext=(4, 4), fontsize=7)
            ax.invert_yaxis()
            ax.set_ylabel("magnitude")
            rax.plot(um, (d - med) / e, "o", color="0.3", ms=4)
        plain_text(ax.set_title(pan["label"], fontsize=10))
        ax.legend(fontsize=8, loc="best")
        rax.axhline(0, color="tab:red", lw=0.6)
        rax.set_ylabel("(data−model)/σ", fontsize=8)
        rax.set_xlabel("wavelength [µm]")
        ax.set_xlim(rax.get_xlim())
    head = title or ""
    if not converged:
        head = f"{head}\n{CAUTION}" if head else CAUTION
    if head:
        plain_text(fig.suptitle(head, color="black" if converged else "red"))
    fig.tight_layout()
    fig.savefig(path, dpi=90, metadata=_meta(converged))
    plt.close(fig)
