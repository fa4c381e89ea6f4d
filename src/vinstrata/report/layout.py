"""Page furniture shared by every briefing page: size, palette, text blocks.

The qualitative palette is Okabe and Ito's colour-blind-safe set (Okabe & Ito
2008, "Color Universal Design"), extended by Paul Tol's "muted" scheme for
ranges with more than eight styles; a style keeps its colour on every page
(colour by style index). Grades use a colour-blind-safe sequential map
(cividis) and effect sizes a diverging one (PuOr).
"""

from __future__ import annotations

import contextlib
import textwrap
from collections.abc import Iterator, Sequence

import matplotlib

matplotlib.use("Agg")

from matplotlib.axes import Axes
from matplotlib.figure import Figure

# Titles, producers, lot ids, style, column and analyte names, passthrough values and flag
# words come from users and their files: matplotlib would read the text between two "$"
# as mathematical notation (and fail on it, or change it), and TeX would read all of it
# as markup. Every briefing text is drawn as the literal string instead.
LITERAL_TEXT = {"text.parse_math": False, "text.usetex": False}

PAGE = (8.27, 11.69)  # A4 portrait, inches
MARGIN = 0.06
OKABE_ITO = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
             "#000000")
TOL_MUTED = ("#332288", "#88CCEE", "#44AA99", "#117733", "#999933", "#DDCC77", "#CC6677",
             "#882255", "#AA4499")
UNASSIGNED_COLOUR = "#BBBBBB"
LINE_ADVANCE = 1.45  # line height in font sizes
LINESPACING = 1.24  # matplotlib's multi-line spacing giving that advance for DejaVu fonts
WARN_COLOUR = "#B2182B"
INK = "#222222"
MUTED = "#666666"
BAND_COLOURS = ("#D55E00", "#BBBBBB", "#0072B2")  # bottom, middle, top (Okabe-Ito)


@contextlib.contextmanager
def literal_text() -> Iterator[None]:
    """Draw every text made inside the block literally: no mathtext, no TeX.

    Text artists take these settings when they are made, and tick labels are
    made while a figure is saved, so the block must hold both the page drawing
    and the saving.
    """
    with matplotlib.rc_context(LITERAL_TEXT):
        yield


def style_colour(index: int) -> str:
    """The colour of style number ``index`` (0 = S1) on every page."""
    palette = OKABE_ITO + TOL_MUTED
    return palette[index % len(palette)]


def band_colours(n_bands: int) -> list[str]:
    """Bottom band vermillion, top band blue, middle bands greys."""
    if n_bands == 2:
        return [BAND_COLOURS[0], BAND_COLOURS[2]]
    greys = ["#AAAAAA", "#CCCCCC", "#888888", "#DDDDDD"]
    return [BAND_COLOURS[0], *[greys[i % len(greys)] for i in range(n_bands - 2)],
            BAND_COLOURS[2]]


def new_page(title: str, subtitle: str = "") -> Figure:
    """An A4 page with a title band; returns the figure."""
    fig = Figure(figsize=PAGE)
    fig.text(MARGIN, 0.965, title, fontsize=15, fontweight="bold", color=INK, va="top")
    if subtitle:
        lines = wrap(subtitle, 120)[:2]
        for k, line in enumerate(lines):
            fig.text(MARGIN, 0.942 - k * 0.0135, line, fontsize=8.5, color=MUTED, va="top")
    fig.add_artist(matplotlib.lines.Line2D([MARGIN, 1 - MARGIN], [0.912, 0.912], color="#999999",
                                           linewidth=0.6, transform=fig.transFigure))
    return fig


def footer(fig: Figure, text: str, page: int) -> None:
    fig.text(MARGIN, 0.02, text, fontsize=7, color=MUTED)
    fig.text(1 - MARGIN, 0.02, f"page {page}", fontsize=7, color=MUTED, ha="right")


def wrap(text: str, width: int) -> list[str]:
    return textwrap.wrap(text, width=width, break_long_words=True) or [""]


def text_block(fig: Figure, top: float, paragraphs: Sequence[str], size: float = 9.0,
               width: int = 105, left: float = MARGIN, bottom: float = 0.05,
               bullet: str = "", gap: float = 0.35) -> tuple[float, int]:
    """Write wrapped paragraphs from ``top`` down; returns (next y, paragraphs written).

    Stops before ``bottom``; the caller says what was left out.
    """
    line = size / 72 / PAGE[1] * LINE_ADVANCE
    y = top
    written = 0
    for para in paragraphs:
        lines = wrap(para, width - len(bullet))
        needed = line * (len(lines) + gap)
        if y - needed < bottom:
            break
        body = [(bullet if k == 0 else " " * len(bullet)) + text for k, text in enumerate(lines)]
        # one text artist per paragraph: far fewer layouts than one per line
        fig.text(left, y, "\n".join(body), fontsize=size, color=INK, va="top",
                 linespacing=LINESPACING)
        y -= line * len(lines) + line * gap
        written += 1
    return y, written


def mono_block(fig: Figure, top: float, rows: Sequence[str], size: float = 7.5,
               left: float = MARGIN, bold_first: bool = False) -> float:
    """Rows of a fixed-width table as one text artist; returns the y below it."""
    line = size / 72 / PAGE[1] * LINE_ADVANCE
    if not rows:
        return top
    start = 0
    if bold_first:
        fig.text(left, top, rows[0], fontsize=size, family="monospace", fontweight="bold",
                 color=INK, va="top")
        start = 1
    if len(rows) > start:
        fig.text(left, top - line * start, "\n".join(rows[start:]), fontsize=size,
                 family="monospace", color=INK, va="top", linespacing=LINESPACING)
    return top - line * len(rows)


def heading(fig: Figure, y: float, text: str, size: float = 11.0) -> float:
    fig.text(MARGIN, y, text, fontsize=size, fontweight="bold", color=INK, va="top")
    return y - size / 72 / PAGE[1] * 1.9


def tidy(ax: Axes) -> None:
    """Light axes: no top or right spine, small ticks."""
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=7, length=2)
