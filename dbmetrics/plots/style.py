"""Our look: Okabe-Ito colours, one marker and line style per series, fixed 1600 x 1000 px PNGs.

Every series differs in marker and line style as well as colour, so a picture printed in
greyscale or seen with any colour-vision deficiency still tells the series apart.
"""

from __future__ import annotations

import io

MISSING = "plotting needs matplotlib: pip install 'dbmetrics[plot]'"

FIGSIZE = (8.0, 5.0)  # inches
DPI = 200
WIDTH, HEIGHT = int(FIGSIZE[0] * DPI), int(FIGSIZE[1] * DPI)

# Okabe & Ito (2008), "Color Universal Design"; yellow left out (too pale on white).
COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
LINESTYLES = ("-", "--", "-.", ":")
HATCHES = ("", "//", "..", "xx", "\\\\", "++", "oo")
GREY = "#777777"


def require_matplotlib() -> None:
    """Raise the one-line DbmetricsError when matplotlib is not installed."""
    from dbmetrics.errors import DbmetricsError

    try:
        import matplotlib.figure  # noqa: F401
    except ImportError:
        raise DbmetricsError(MISSING) from None


def new_figure():
    """A pyplot-free Figure (no GUI backend, no global state) of FIGSIZE inches."""
    require_matplotlib()
    from matplotlib.figure import Figure

    figure = Figure(figsize=FIGSIZE, dpi=DPI, layout="constrained")
    figure.set_facecolor("white")
    return figure


def series_style(i: int) -> dict:
    """Colour, marker and line style of the i-th series."""
    return {
        "color": COLOURS[i % len(COLOURS)],
        "marker": MARKERS[i % len(MARKERS)],
        "linestyle": LINESTYLES[i % len(LINESTYLES)],
    }


def tidy(ax) -> None:
    """Light grid behind the data, no top/right frame."""
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def png_bytes(figure) -> bytes:
    """The figure as PNG bytes of exactly WIDTH x HEIGHT pixels (no tight bounding box)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=DPI, metadata={"Software": None})
    return buffer.getvalue()
