"""The common look of the report's pictures, and the Plot they become.

matplotlib without pyplot (a `Figure` with the Agg canvas): no global state, no display, safe
from any thread. The look is deliberately plain: white ground, grey for everything that is not
a passing device, one accent colour.
"""

from __future__ import annotations

import io
from collections.abc import Callable
from dataclasses import dataclass

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

mpl.use("Agg")  # should pyplot be imported elsewhere, it too must not look for a display

ACCENT = "#1f6f8b"
INK = "#222222"
GREY = "#9a9a9a"
PALE = "#d9d9d9"
DPI = 100
STYLE = {
    "font.size": 9,
    "axes.edgecolor": "#555555",
    "axes.labelcolor": INK,
    "axes.titlesize": 10,
    "axes.titleweight": "bold",
    "xtick.color": "#444444",
    "ytick.color": "#444444",
    "legend.frameon": False,
    "legend.fontsize": 8,
    # Lot names, serials and soft bins are drawn as written: '$...$' is text, not mathematics
    # (matplotlib would parse it, and a lone '$' would end the report in an error).
    "text.parse_math": False,
}
SYMBOL = {"A": "A", "V": "V", "ohm": "Ω", "W": "W"}
PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"))


@dataclass(frozen=True)
class Plot:
    name: str  # file name without .png
    title: str
    caption: str
    png: bytes
    width_px: int
    height_px: int


def scale_for(values: np.ndarray, unit: str) -> tuple[float, str]:
    """A display factor and unit label so the typical value reads between 1 and 1000."""
    finite = np.abs(values[np.isfinite(values)])
    typical = float(np.median(finite)) if len(finite) else 1.0
    symbol = SYMBOL.get(unit, unit)
    for factor, prefix in PREFIXES:
        if typical >= factor * 0.9995:
            return 1 / factor, prefix + symbol
    return 1e12, "p" + symbol


def new_figure(
    width_in: float, height_in: float, cols: int = 1, ratios: tuple[float, ...] | None = None
) -> tuple[Figure, list]:
    fig = Figure(figsize=(width_in, height_in), dpi=DPI, facecolor="white")
    FigureCanvasAgg(fig)
    grid = fig.add_gridspec(1, cols, width_ratios=ratios)
    axes = [fig.add_subplot(grid[0, k]) for k in range(cols)]
    for ax in axes:
        ax.spines[["top", "right"]].set_visible(False)
        ax.grid(True, color="#eeeeee", linewidth=0.8)
        ax.set_axisbelow(True)
    return fig, axes


def finish(fig: Figure, name: str, title: str, caption: str) -> Plot:
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", facecolor="white", metadata={"Software": None})
    width, height = fig.canvas.get_width_height()
    return Plot(name, title, caption, buf.getvalue(), width, height)


def render(build: Callable[..., Plot], *args) -> Plot:
    """Build a plot under the report's style, without touching matplotlib's global settings."""
    with mpl.rc_context(STYLE):
        return build(*args)


def short_text(text: str, width: int = 18, most: int = 3) -> str:
    """Wrap a soft bin name onto a few short lines."""
    if len(text) <= width:
        return text
    words, lines = text.split(), [""]
    for word in words:
        if len(lines[-1]) + len(word) + 1 > width and lines[-1]:
            lines.append("")
        lines[-1] = (lines[-1] + " " + word).strip()
    return "\n".join(lines[:most]) + ("…" if len(lines) > most else "")
