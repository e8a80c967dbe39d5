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
ACTUAL_COLOUR = "#202020"
MODEL_COLOURS = ["#2b6a99", "#c2582b", "#4d8c3a", "#7a5a9e", "#a08a2a", "#3a8f8f"]
BAR_COLOUR = "#d9d9d9"


def model_colour(position: int) -> str:
    """The colour of the model drawn in `position` (0, 1, ...), cycling through MODEL_COLOURS."""
    return MODEL_COLOURS[position % len(MODEL_COLOURS)]


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


def save_figure(fig: Figure, path: str | Path) -> Path:
    """Add the caution footer, lay out and write the PNG (without a software stamp)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    target = Path(path)
    if not target.parent.is_dir():
        raise InputError(f"{target}: the folder {target.parent} does not exist")
    fig.text(0.5, 0.012, CAPTION, ha="center", va="bottom", fontsize=7, color="#555555")
    fig.tight_layout(rect=(0, 0.045, 1, 1))
    FigureCanvasAgg(fig)  # attaches itself as fig.canvas
    fig.savefig(target, format="png", metadata={"Software": None})
    return target
