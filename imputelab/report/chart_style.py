"""The charts' style and the parts of them that need no matplotlib.

The palette (Okabe & Ito 2008), the matplotlib settings every chart runs under (:data:`STYLE`,
applied by :mod:`imputelab.report.charts`), the row order of the map of blanks, and the
clean-up that makes matplotlib's SVG text fit to inline in the page.
"""

from __future__ import annotations

import re

import numpy as np

__all__ = ["CHOSEN", "FILLED", "INK", "MASK_MARKERS", "OBSERVED", "OTHER", "PALETTE", "PAPER",
           "RULE", "STYLE", "WIDTH", "fmt_share", "inline_svg", "pattern_order"]

# Okabe, M. & Ito, K. (2008). Color Universal Design (CUD): how to make figures and
# presentations that are friendly to colorblind people. The eight colours, as listed with that
# citation in R's documentation of the palette (see package, scale_color_okabeito):
# black #000000, orange #E69F00, sky blue #56B4E9, bluish green #009E73, yellow #F0E442,
# blue #0072B2, vermillion #D55E00, reddish purple #CC79A7. Yellow is left out: it is too
# pale on white paper.
PALETTE = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
}
INK = "#22262e"  # text and axes: near-black, softer than pure black on screen
RULE = "#d9dbe0"  # grid lines
PAPER = "#ffffff"  # figures stay white so they print as they look
OBSERVED = PALETTE["blue"]
FILLED = PALETTE["vermillion"]
CHOSEN = PALETTE["orange"]
OTHER = PALETTE["sky"]
MASK_MARKERS = ("o", "s", "^", "D", "v", "P")

STYLE = {
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],  # shipped with matplotlib: the same layout everywhere
    "font.size": 9.0,
    "axes.titlesize": 10.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 9.0,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "axes.linewidth": 0.8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": False,
    "grid.color": RULE,
    "grid.linewidth": 0.6,
    "xtick.color": INK,
    "ytick.color": INK,
    "text.color": INK,
    "legend.frameon": False,
    "legend.fontsize": 8.5,
    "hatch.linewidth": 0.8,
    "figure.facecolor": PAPER,
    "axes.facecolor": PAPER,
    "savefig.facecolor": PAPER,
    # SVG output: real <text> (searchable, selectable, small) and ids from a fixed salt, so
    # the same figure gives the same bytes (matplotlib otherwise salts ids with a uuid).
    "svg.fonttype": "none",
    "svg.hashsalt": "imputelab-report",
}

WIDTH = 7.2  # inches: the text width of the report's column


def fmt_share(value: float) -> str:
    """A share as a percentage, one decimal below 10%."""
    return f"{value:.0%}" if value >= 0.1 or value == 0 else f"{value:.1%}"


def pattern_order(blank: np.ndarray) -> np.ndarray:
    """Row order that groups equal patterns of blanks, the most frequent pattern first.

    Equal counts put the pattern with fewer blanks first, then keep the first seen first, so
    the order is fully determined by the matrix.
    """
    blank = np.asarray(blank, dtype=bool)
    if blank.shape[0] == 0:
        return np.zeros(0, dtype=int)
    _, first, inverse, counts = np.unique(blank, axis=0, return_index=True,
                                          return_inverse=True, return_counts=True)
    inverse = inverse.ravel()
    blanks = blank[first].sum(axis=1)
    rank = np.empty(len(counts), dtype=int)
    rank[np.lexsort([first, blanks, -counts])] = np.arange(len(counts))
    return np.lexsort([np.arange(blank.shape[0]), rank[inverse]])


_ID = re.compile(r'\sid="([^"]+)"')
_REF = re.compile(r'(url\(#|href="#)([^)"]+)')


def inline_svg(text: str, *, alt: str, prefix: str) -> str:
    """matplotlib's SVG text made fit to inline, the same bytes for the same input.

    The XML prologue, the DOCTYPE, comments and ``<metadata>`` go; ids no element refers to
    are dropped and the others get ``prefix``; ``alt`` (XML-escaped here) becomes the SVG's
    ``<title>`` and the SVG gets ``role="img"``.
    """
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)
    text = re.sub(r"<!--.*?-->\s*", "", text, flags=re.S)
    used = {m.group(2) for m in _REF.finditer(text)}
    text = _ID.sub(lambda m: f' id="{prefix}-{m.group(1)}"' if m.group(1) in used else "",
                   text)
    text = _REF.sub(lambda m: f"{m.group(1)}{prefix}-{m.group(2)}", text)
    title = (alt.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;"))
    head_end = text.index(">") + 1
    return (text[:head_end - 1] + ' role="img">' + f"<title>{title}</title>"
            + text[head_end:])
