"""The figures' common style: the colour-blind-safe palette of Okabe and Ito [1]_ (also
recommended by Wong [2]_), matplotlib settings, and figures on the Agg canvas (no display, no
pyplot state); `save_png` writes one.

Wherever two series share an axis they differ in line style or marker too, so a figure printed
in grey still reads. Text that comes from the run (run ids, labels) is drawn as plain text:
``$`` is escaped so that it is never parsed as mathtext.

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
   that are friendly to colorblind people", J*Fly, 2008 (the eight-colour palette).
.. [2] B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

#: Okabe-Ito colours by name.
BLACK = "#000000"


ORANGE = "#E69F00"


SKY_BLUE = "#56B4E9"


GREEN = "#009E73"


YELLOW = "#F0E442"


BLUE = "#0072B2"


VERMILLION = "#D55E00"


PURPLE = "#CC79A7"


GREY = "#7f7f7f"


#: Per analysis (series) of one figure: colour, line style, marker, band hatch.
SERIES_STYLES = (
    (BLUE, "-", "o", None),
    (VERMILLION, "--", "s", "//"),
    (GREEN, ":", "^", "\\\\"),
    (PURPLE, "-.", "D", "xx"),
    (ORANGE, (0, (5, 1, 1, 1)), "v", ".."),
)


#: Guard states on the timeline: colour and hatch (the hatch tells them apart without colour).
STATE_STYLES = {
    "safe": (GREEN, ""),
    "armed": (YELLOW, "//"),
    "emitting": (VERMILLION, "xx"),
    "tripped": (PURPLE, ".."),
}


RC = {
    "font.size": 10,
    "axes.titlesize": 11,
    "axes.labelsize": 10,
    "legend.fontsize": 8.5,
    "axes.grid": True,
    "grid.alpha": 0.3,
    "grid.linestyle": ":",
    "savefig.dpi": 100,
    "text.usetex": False,
}


def plain(text: Any) -> str:
    """Run text made safe for a matplotlib label (no mathtext)."""
    return str(text).replace("$", r"\$")


def new_figure(width: float, height: float) -> Figure:
    """An empty figure of ``width`` x ``height`` inches on its own Agg canvas (no pyplot)."""
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def save_png(fig: Figure, path: str | Path, dpi: int = 100) -> Path:
    """Write ``fig`` as a PNG file; returns the path."""
    if not isinstance(fig, Figure):
        raise ValueError(f"fig: expected a matplotlib Figure, got {type(fig).__name__}")
    path = Path(path)
    with rc_context(RC):
        fig.savefig(path, format="png", dpi=dpi)
    return path


def plus_minus_label(value: float, sigma: float) -> str:
    """``value ± sigma`` for a figure label, with two significant digits of sigma."""
    try:
        value, sigma = float(value), float(sigma)
    except (TypeError, ValueError):
        return f"{value} ± {sigma}"
    if not (math.isfinite(sigma) and sigma > 0 and math.isfinite(value)):
        return f"{value:.6g}"
    decimals = max(0, 1 - int(math.floor(math.log10(sigma))))
    if decimals > 12 or abs(value) >= 1e5:
        return f"{value:.4g} ± {sigma:.2g}"
    return f"{value:.{decimals}f} ± {sigma:.{decimals}f}"
