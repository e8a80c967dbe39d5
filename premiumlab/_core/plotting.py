"""The one look of every premiumlab figure: palette, axes style, level ticks, caution footer, PNG output.

matplotlib is imported lazily and only through its object interface (no pyplot, so no global state).
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from premiumlab._core.errors import InputError

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

CAPTION = "Draft for review by a qualified actuary; rates must be filed and approved under local rate regulation."
#: The one palette: every series keeps its colour in every figure (the report's legend repeats it).
SERIES_COLOURS = {
    "actual": "#202020",
    "glm": "#2b6a99",
    "gbm": "#c2582b",
    "glm_freq_x_sev": "#7a5a9e",
    "gbm_freq_x_sev": "#a08a2a",
    "table": "#4d8c3a",
    "current": "#3a8f8f",
    "tail_fit": "#8c2d5a",
    "other": "#888888",
}
ACTUAL_COLOUR = SERIES_COLOURS["actual"]
BAR_COLOUR = "#d9d9d9"
#: The series kinds in words, as legends and titles name them.
SERIES_WORDS = {
    "actual": "actual",
    "glm": "GLM",
    "gbm": "boosted model",
    "glm_freq_x_sev": "GLM frequency x severity",
    "gbm_freq_x_sev": "boosted frequency x severity",
    "table": "rating table",
    "current": "current table",
    "tail_fit": "generalised Pareto fit",
}


def series_kind(name: str) -> str:
    """The palette key of a series: a model column (`glm_frequency`, `gbm_freq_x_sev`) by its
    model kind, or a key of SERIES_COLOURS as it is; "other" for anything else."""
    if name in SERIES_COLOURS:
        return name
    if name.endswith("_freq_x_sev"):
        return name
    kind = name.split("_", 1)[0]
    return kind if kind in SERIES_COLOURS else "other"


def series_colour(name: str) -> str:
    """The fixed colour of a series or model column (`series_kind`)."""
    return SERIES_COLOURS[series_kind(name)]


def new_figure(width: float = 7.5, height: float = 4.8) -> Figure:
    """A matplotlib Figure of `width` x `height` inches at 110 dpi, without pyplot's global state."""
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), dpi=110)


def plain_axes(ax: Axes) -> None:
    """Our plain look: light horizontal grid, no top or right frame."""
    ax.grid(axis="y", color="#e6e6e6", linewidth=0.8)
    ax.set_axisbelow(True)
    ax.spines["top"].set_visible(False)
    ax.spines["right"].set_visible(False)


def level_ticks(ax: Axes, positions: np.ndarray, labels: list[str], **text: Any) -> None:
    """One tick per level; slanted when there are many levels or long labels."""
    ax.set_xticks(positions)
    slanted = len(labels) > 8 or max(len(label) for label in labels) > 6
    ax.set_xticklabels(labels, rotation=45 if slanted else 0, ha="right" if slanted else "center", **text)


def _plain_text(fig: Figure) -> None:
    """Every text of the figure drawn as written: a `$` in a level or factor name is never math."""
    from matplotlib.text import Text

    for text in fig.findobj(Text):
        text.set_parse_math(False)


def save_figure(fig: Figure, path: str | Path, *, caution: bool = True) -> Path:
    """Add the caution footer (unless `caution` is False: a report that states it once at its top),
    lay out and write the PNG (without a software stamp). No text is parsed as math."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    target = Path(path)
    if not target.parent.is_dir():
        raise InputError(f"{target}: the folder {target.parent} does not exist")
    if caution:
        fig.text(0.5, 0.012, CAPTION, ha="center", va="bottom", fontsize=7, color="#555555")
    FigureCanvasAgg(fig)  # attaches itself as fig.canvas
    _plain_text(fig)
    fig.tight_layout(rect=(0, 0.045 if caution else 0, 1, 1))
    _plain_text(fig)
    fig.savefig(target, format="png", metadata={"Software": None})
    return target
