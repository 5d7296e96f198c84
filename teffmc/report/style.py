"""Journal figure style: widths, fonts, a colour-blind-safe palette, saving as PDF and PNG.

Widths are the usual two-column journal sizes (common practice, no source): a column
3.5 in wide, a page 7.1 in. Fonts 8 pt (ticks 7 pt), readable when printed at those sizes.
Colours are the Okabe & Ito (2008) palette for colour-blind readers (from memory:
"Color Universal Design", J*Fly); lines also differ in style where colours carry meaning.
Every figure uses constrained layout, and :func:`text_overlaps` finds text that collides
after drawing (the figure tests call it on every figure).
"""

import numpy as np

__all__ = ["COLUMN", "PAGE", "PALETTE", "figure", "save", "save_many", "text_overlaps",
           "unit_label",
           "CAUTION", "plain_text", "png_meta", "DIMENSIONLESS", "styled"]

COLUMN, PAGE = 3.5, 7.1   # [inch]
#: Okabe & Ito (2008): black, orange, sky blue, bluish green, yellow, blue, vermillion,
#: reddish purple (from memory)
PALETTE = ["#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
           "#CC79A7"]
#: colours used for meaning across figures
DATA, MODEL, DRAWS, MASK = "#000000", "#D55E00", "#E69F00", "0.85"
SERIES = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9"]
CAUTION = "NOT CONVERGED: do not quote these numbers"
RC = {"font.size": 8, "axes.labelsize": 8, "axes.titlesize": 8, "xtick.labelsize": 7,
      "ytick.labelsize": 7, "legend.fontsize": 7, "figure.titlesize": 9,
      "axes.prop_cycle": None, "lines.linewidth": 1.0, "axes.linewidth": 0.6,
      "xtick.major.width": 0.6, "ytick.major.width": 0.6, "pdf.fonttype": 42,
      "savefig.dpi": 200, "axes.formatter.useoffset": False}


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def rc():
    """Return the rcParams of every teffmc figure (a dict for ``plt.rc_context``)."""
    from cycler import cycler

    return {**RC, "axes.prop_cycle": cycler(color=SERIES)}


def styled(build):
    """Run a figure builder inside the journal rcParams.

    Texts made after the figure take them from the rcParams in force when they are made.
    """
    import functools

    @functools.wraps(build)
    def wrapper(*args, **kwargs):
        with _plt().rc_context(rc()):
            return build(*args, **kwargs)
    return wrapper


def figure(width=PAGE, height=None, **kw):
    """Return a figure of a journal width [inch] with constrained layout."""
    plt = _plt()
    with plt.rc_context(rc()):
        return plt.figure(figsize=(width, height or 0.75 * width), layout="constrained", **kw)


def plain_text(text):
    r"""Draw a matplotlib Text as typed, neither mathtext nor TeX.

    For user-given names (a star called "$\frac{a" would otherwise fail to parse when the
    figure is drawn).
    """
    text.set_usetex(False)
    text.set_parse_math(False)
    return text


def png_meta(converged):
    """PNG text chunks: lets scripts (and tests) see the caution without reading pixels."""
    return {"Software": "teffmc", "Description": "converged" if converged else CAUTION}


#: labels of dimensionless quantities made by :func:`unit_label` (the figure tests accept
#: exactly these without a bracketed unit)
DIMENSIONLESS = set()


def unit_label(text, unit):
    """Return ``"text [unit]"``, the axis label of a quantity.

    A dimensionless quantity (unit "") keeps its bare symbol and is recorded in
    :data:`DIMENSIONLESS`.
    """
    if not unit:
        DIMENSIONLESS.add(text)
    unit = {"um": "µm", "km/s": "km s$^{-1}$", "W m^-2": "W m$^{-2}$", "R_sun": "$R_\\odot$",
            "L_sun": "$L_\\odot$"}.get(unit, unit)
    return f"{text} [{unit}]" if unit else text


def save(fig, stem, formats, *, converged=True):
    """Save ``fig`` as ``stem.<fmt>`` for each of ``formats`` ("pdf", "png"); close it.

    Returns the written paths.
    """
    plt = _plt()
    out = []
    for fmt in formats:
        path = stem.with_name(f"{stem.name}.{fmt}")
        meta = png_meta(converged) if fmt == "png" else {
            "Creator": "teffmc", "Subject": "converged" if converged else CAUTION}
        with plt.rc_context(rc()):
            fig.savefig(path, format=fmt, metadata=meta)
        out.append(path)
    plt.close(fig)
    return out


def save_many(fig, stem, formats, *, converged=True, keep_png=None, key=None):
    """Save like :func:`save` and also keep the PNG bytes in ``keep_png[key]``.

    The bytes (for the HTML page) come from the written file or, without "png" in
    ``formats``, are drawn in memory.
    """
    import io

    if keep_png is not None and "png" not in formats:
        plt = _plt()
        buf = io.BytesIO()
        with plt.rc_context(rc()):
            fig.savefig(buf, format="png", metadata=png_meta(converged))
        keep_png[key] = buf.getvalue()
    paths = save(fig, stem, formats, converged=converged)
    if keep_png is not None and "png" in formats:
        keep_png[key] = stem.with_name(f"{stem.name}.png").read_bytes()
    return paths


def _texts(fig):
    """Every drawn, non-empty Text of a drawn figure with its window extent.

    Tick labels count only for the ticks matplotlib draws (those inside the view
    limits): the others exist as Text objects with stale positions but are not drawn.
    """
    from matplotlib.text import Text

    renderer = fig.canvas.get_renderer()
    ticks, drawn = set(), []
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            for t in axis.majorTicks + axis.minorTicks:
                ticks.update((id(t.label1), id(t.label2)))
            if ax.get_visible() and axis.get_visible():
                for t in axis._update_ticks():  # the ticks matplotlib draws
                    drawn += [lab for lab in (t.label1, t.label2) if lab.get_visible()]
    texts = [t for t in fig.findobj(Text) if id(t) not in ticks] + drawn
    out = []
    for t in texts:
        if not t.get_visible() or not t.get_text().strip():
            continue
        ax = t.axes  # a text of an invisible axes is not drawn
        if ax is not None and not ax.get_visible():
            continue
        bb = t.get_window_extent(renderer)
        if bb.width > 0 and bb.height > 0:
            out.append((t, bb))
    return out


def text_overlaps(fig, pad=0.5, gap=1.0):
    """Find texts that overlap or leave the figure; ``[]`` for a clean figure.

    Pairs of drawn texts whose boxes overlap or come closer than ``gap`` pixels (at the
    figure's dpi, 100 by default: 0.01 in), and texts reaching more than ``pad`` pixels
    outside the figure.

    Tick labels that matplotlib itself hides do not count (they are not visible).
    """
    fig.canvas.draw()
    items = _texts(fig)
    W, H = fig.bbox.width, fig.bbox.height
    bad = []
    for t, bb in items:
        if bb.x0 < -pad or bb.y0 < -pad or bb.x1 > W + pad or bb.y1 > H + pad:
            bad.append((t.get_text(), "outside the figure"))
    boxes = np.array([[bb.x0, bb.y0, bb.x1, bb.y1] for _, bb in items])
    for i in range(len(items)):
        if not len(boxes):
            break
        b = boxes[i]
        ov_x = np.minimum(b[2], boxes[i + 1:, 2]) - np.maximum(b[0], boxes[i + 1:, 0])
        ov_y = np.minimum(b[3], boxes[i + 1:, 3]) - np.maximum(b[1], boxes[i + 1:, 1])
        for j in np.flatnonzero((ov_x > -gap) & (ov_y > -gap)):
            bad.append((items[i][0].get_text(), items[i + 1 + j][0].get_text()))
    return bad
