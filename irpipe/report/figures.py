"""Matplotlib helpers for the report sections that still draw with a plotting library
(``irpipe.report.comparison``). The survey's own pictures (thermogram, histogram, trend)
are drawn without it by ``irpipe.report.pictures``.

Matplotlib is imported inside the functions (start-up speed of the command line) and used
through its object interface with the Agg canvas, so no global backend is switched.
"""
from __future__ import annotations

import io

from .pictures import colour_range  # noqa: F401  (one colour scale rule for every picture)

TEMPERATURE_CMAP = "inferno"       # matplotlib name of irpipe.colourtable.SEQUENTIAL
INVALID_COLOUR = "#8c8c8c"
DPI = 110
WIDTH_IN = 7.4
_INK = "#1b1b1b"


def _new_figure(w, h):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(w, h), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


def _png(fig):
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _style(ax):
    ax.tick_params(labelsize=7.5, colors=_INK, length=3)
    for s in ax.spines.values():
        s.set_linewidth(0.6)
        s.set_color("#555555")
