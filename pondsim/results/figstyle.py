"""One figure style for every figure pondsim writes.

- Title: what the figure shows on the first line; the scenario's site, study and strain on
  the second (never the weather file's station name: that appears only in the footer as
  the weather source).
- Footer: the caution mark and the weather source in a reserved strip at the bottom of
  the canvas, outside every axes, so that it never overlaps a title, label or legend.
- Colours: the Okabe & Ito (2008) palette, fixed per policy across every figure of a
  run (a policy's colour is set by its place in the scenario's list of policies and
  plans, which every figure receives in the same order), each policy also with its own
  line style and hatch so that it stays apart in greyscale print.
- Amounts (yield, light, water, energy) start at zero; every axis has its unit.
- Legends sit outside the data (below the axes or the figure), never on it.

Why this palette: Okabe & Ito chose its eight colours so that they stay distinct for
the common forms of colour-vision deficiency (protanopia, deuteranopia and tritanopia);
Wong (2011) recommends it for scientific figures. Yellow (#F0E442) is too light for lines
on white, so it is used last.

References
----------
Okabe, M. & Ito, K. (2008) Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. J*FLY, https://jfly.uni-koeln.de/color/
Wong, B. (2011) Points of view: Color blindness. Nature Methods 8:441.
doi:10.1038/nmeth.1618
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from pondsim.results.files import atomic_write  # noqa: E402

#: Okabe & Ito (2008) colours, in the order policies receive them (yellow last).
OKABE_ITO = {"blue": "#0072B2", "orange": "#E69F00", "bluish green": "#009E73",
             "vermillion": "#D55E00", "reddish purple": "#CC79A7", "sky blue": "#56B4E9",
             "yellow": "#F0E442", "black": "#000000"}
COLORS = [OKABE_ITO[n] for n in ("blue", "orange", "bluish green", "vermillion",
                                 "reddish purple", "sky blue", "yellow")]
#: Line styles and hatches paired with the colours (greyscale print tells them apart).
LINESTYLES = ["-", "--", "-.", ":", (0, (5, 1, 1, 1)), (0, (1, 1)), (0, (8, 2))]
HATCHES = ["", "//", "..", "xx", "\\\\", "++", "oo"]
MARKERS = ["o", "s", "^", "D", "v", "P", "X"]
#: Neutral colours for references (carrying capacity, thresholds) and rugs.
REFERENCE = "0.15"
LIGHT_REFERENCE = "0.6"

#: Short caution mark of every figure (the full text is in every table and report).
CAUTION_MARK = "pondsim estimates, not guarantees: defer to local codes, permits and " \
               "licensed engineers"
#: Height of the footer strip [inch] and the footer's font size [pt].
FOOTER_IN = 0.3
FOOTER_PT = 7.0
DPI = 110
#: Characters of a 12 pt title line that fit one inch of figure width (DejaVu Sans
#: averages about 0.6 em per character: 72 / (12 * 0.6) = 10; 9.5 leaves a margin).
TITLE_CHARS_PER_INCH = 9.5
MONTHS = [pd.Timestamp(2000, m, 1).strftime("%b") for m in range(1, 13)]


def policy_style(index: int) -> dict:
    """Colour, line style, marker and hatch of the policy at *index* (scenario order)."""
    i = int(index)
    return {"color": COLORS[i % len(COLORS)], "linestyle": LINESTYLES[i % len(LINESTYLES)],
            "marker": MARKERS[i % len(MARKERS)], "hatch": HATCHES[i % len(HATCHES)]}


def policy_styles(names) -> dict:
    """``{policy name: style}`` for the policies in their scenario order."""
    return {str(n): policy_style(i) for i, n in enumerate(names)}


def line_kw(style: dict) -> dict:
    return {"color": style["color"], "linestyle": style["linestyle"]}


def tag_policy(artists, name) -> None:
    """Mark artists as drawn for policy *name* (``gid = "policy:<name>"``); the tests read
    the colours back from these tags."""
    if not isinstance(artists, list | tuple):
        artists = [artists]
    for a in artists:
        if hasattr(a, "patches"):  # a BarContainer
            for p in a.patches:
                p.set_gid(f"policy:{name}")
        elif hasattr(a, "set_gid"):
            a.set_gid(f"policy:{name}")


def context_line(site: str | None = None, study: str | None = None,
                 strain: str | None = None, extra: str | None = None) -> str:
    """``site · study · strain`` for the second title line (empty parts left out)."""
    parts = [str(site) if site else None, str(study) if study else None,
             f"strain {strain}" if strain else None, extra]
    return " · ".join(p for p in parts if p)


def context_of(ds, extra: str | None = None) -> str:
    """The title context of a results Dataset: the scenario's site, study and strain."""
    a = ds.attrs
    return context_line(a.get("site"), a.get("study"), a.get("strain"), extra)


def source_of(ds) -> str | None:
    """The weather source of a results Dataset for the footer."""
    return ds.attrs.get("weather_source") or None


def new_figure(subject: str, context: str, *, nrows: int = 1, ncols: int = 1,
               size=(10, 5), source: str | None = None, **kw):
    """A figure with the title and a footer strip; ``(fig, axes)``.

    The figure is split in two subfigures: the main part (returned as ``fig``: title,
    axes, legends, colour bars) and a strip of :data:`FOOTER_IN` at the bottom that holds
    only the caution mark and the weather source, so that nothing can overlap them.

    Parameters
    ----------
    subject : str
        What the figure shows (first title line).
    context : str
        Site, study and strain (second title line), see :func:`context_line`.
    size : (float, float)
        Figure size [inch], footer included.
    source : str, optional
        Weather source shown in the footer.
    **kw
        Passed to :func:`matplotlib.pyplot.subplots` (``sharex``, ``gridspec_kw`` ...).
    """
    root = plt.figure(figsize=size, layout="constrained")
    main, foot = root.subfigures(2, 1, height_ratios=[size[1] - FOOTER_IN, FOOTER_IN])
    axes = main.subplots(nrows, ncols, **kw)
    width = int(size[0] * TITLE_CHARS_PER_INCH)
    main.suptitle("\n".join([subject, *_wrap_parts(context, width)]), fontsize=12,
                  gid="title")
    footer = CAUTION_MARK + (f" · weather: {source}" if source else "")
    foot.text(0.006, 0.5, footer, fontsize=FOOTER_PT, color="0.25", ha="left",
              va="center", gid="caution")
    return main, axes


def _wrap_parts(text: str, width: int) -> list[str]:
    """*text* in lines of at most *width* characters, broken at its " · " separators."""
    lines: list[str] = []
    for part in (text.split(" · ") if text else []):
        if lines and len(lines[-1]) + 3 + len(part) <= width:
            lines[-1] += " · " + part
        else:
            lines.append(part)
    return lines


def month_axis(ax, months=None, *, label: bool = True) -> None:
    """Month names on the x axis at positions 1..12 (or *months*)."""
    months = np.arange(1, 13) if months is None else np.asarray(months)
    ax.set_xticks(months, [MONTHS[int(m) - 1] for m in months])
    ax.set_xlim(months.min() - 0.6, months.max() + 0.6)
    if label:
        ax.set_xlabel("month")


def from_zero(ax, top=None) -> None:
    """An amount axis: y from zero (and room above the data); tagged ``amount``."""
    low, high = ax.get_ylim()
    if top is None:
        top = high
    ax.set_ylim(0.0, max(top, 1e-9))
    ax.set_gid("amount")


def legend_below(fig_or_ax, handles=None, labels=None, *, ncol: int = 4, **kw):
    """A legend outside the data: below the figure's axes (a figure) or below one axes."""
    if handles is None:
        src = fig_or_ax if hasattr(fig_or_ax, "get_legend_handles_labels") else None
        if src is None:
            src = fig_or_ax.axes[0]
        handles, labels = src.get_legend_handles_labels()
    kw = {"fontsize": 8, "frameon": False, "ncol": ncol, **kw}
    if hasattr(fig_or_ax, "suptitle"):  # a Figure
        return fig_or_ax.legend(handles, labels, loc="outside lower center", **kw)
    kw.setdefault("bbox_to_anchor", (0.5, -0.14))
    return fig_or_ax.legend(handles, labels, loc="upper center", **kw)


def legend_right(ax, handles=None, labels=None, **kw):
    """A legend outside the data, to the right of one axes."""
    if handles is None:
        handles, labels = ax.get_legend_handles_labels()
    kw = {"fontsize": 8, "frameon": False, **kw}
    return ax.legend(handles, labels, loc="upper left", bbox_to_anchor=(1.01, 1.0), **kw)


def save(fig, path) -> Path:
    """Write the figure as PNG (atomically) and close it; the figure's label becomes the
    file name (the tests find figures by it)."""
    path = Path(path)
    root = fig.get_figure(root=True)
    root.set_label(path.name)
    out = atomic_write(path, lambda tmp: root.savefig(tmp, dpi=DPI, format="png"))
    plt.close(root)
    return out


__all__ = ["CAUTION_MARK", "COLORS", "HATCHES", "LINESTYLES", "MARKERS", "MONTHS",
           "OKABE_ITO", "context_line", "context_of", "from_zero", "legend_below",
           "legend_right", "line_kw", "month_axis", "new_figure", "policy_style",
           "policy_styles", "save", "source_of", "tag_policy"]
