"""`report`: one self-contained HTML file reviewing a run (and its rating table), rendered from
Jinja2 templates (premiumlab/review/templates/, autoescaped) with figures drawn for it.

The numbers come from `premiumlab.review.report_context`; this module draws the report's own
figures into a temporary folder of its own (PNG, no caution footer: the report states the cautions
once at its top), embeds them as base64 data, renders the template and writes the file through
`atomic_output`, refusing a target that is or lies inside one of the inputs it read.
"""

from __future__ import annotations

import base64
import os
import stat
import tempfile
from pathlib import Path
from typing import Any

import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab._core.outputs import atomic_output, check_target
from premiumlab._core.plotting import SERIES_COLOURS, SERIES_WORDS
from premiumlab.review.report_context import FactorView, report_context
from premiumlab.runs.rundir import Run, open_run

#: The sections of the report in order: anchor and heading (the table of contents).
SECTIONS = (
    ("summary", "Summary"),
    ("warnings", "Warnings"),
    ("book", "The book"),
    ("experience", "Experience adjustments"),
    ("tails", "Large-loss tail"),
    ("glms", "GLM baselines"),
    ("boosted", "Boosted models"),
    ("holdout", "Holdout comparison"),
    ("interactions", "Interactions"),
    ("factors", "Rating factors, one chart each"),
    ("table", "The rating table"),
    ("selections", "Selections"),
    ("audit", "Audit and certificate"),
    ("impact", "Impact"),
    ("provenance", "Provenance"),
)


def _embedded(path: Path) -> str:
    """A PNG this report wrote into its own folder, as a data URI; refused unless a regular file."""
    info = os.lstat(path)
    if not stat.S_ISREG(info.st_mode):
        raise InputError(f"{path}: a report figure is not a regular file")
    return "data:image/png;base64," + base64.b64encode(path.read_bytes()).decode("ascii")


def _draw(context: dict, folder: Path) -> dict[str, Any]:
    """Draw every figure of the report into `folder`; return their data URIs by key."""
    from premiumlab.evaluation import figures

    out: dict[str, Any] = {
        "factors": {},
        "cv": {},
        "lift": {},
        "lorenz": {},
        "double_lift": {},
        "ave": {},
        "claims_ave": {},
    }
    view: FactorView
    if not context["tails"]["absent"]:
        from premiumlab.experience.tails import plot_tail_tables

        out["tails"] = _embedded(plot_tail_tables(context["tails"]["result"], folder / "tails.png", caution=False))
    for k, view in enumerate(context["factors"]):
        path = figures.plot_factor_chart(
            view.labels, view.exposure, view.series, folder / f"factor_{k}.png", factor=view.name, caution=False
        )
        out["factors"][view.name] = _embedded(path)
    for k, model in enumerate(context["boosted"]):
        if model["cv"].empty:
            continue
        table = model["cv"].copy()
        table["leaves_x_rounds"] = table["setting"].map(lambda s: s.get("num_leaves", 31)) * table["rounds"]
        path = figures.plot_cv_curve(
            table,
            folder / f"cv_{k}.png",
            complexity="leaves_x_rounds",
            chosen=model["chosen"],
            target=model["target"],
            caution=False,
        )
        out["cv"][model["target"]] = _embedded(path)
    comparison, holdout = context["comparison"], context["holdout"]
    if comparison is None:
        return out
    for k, (target, curves) in enumerate(holdout["lorenz"].items()):
        lifts = {name: pd.DataFrame(t) for name, t in comparison["lift"].get(target, {}).items()}
        if lifts:
            out["lift"][target] = _embedded(figures.plot_lift(lifts, folder / f"lift_{k}.png", caution=False))
        out["lorenz"][target] = _embedded(
            figures.plot_lorenz(curves, folder / f"lorenz_{k}.png", ginis=holdout["ginis"][target], caution=False)
        )
        if target in comparison["double_lift"]:
            path = figures.plot_double_lift(
                pd.DataFrame(comparison["double_lift"][target]),
                folder / f"double_lift_{k}.png",
                name_a=f"gbm_{target}",
                name_b=f"glm_{target}",
                caution=False,
            )
            out["double_lift"][target] = _embedded(path)
    for k, (factor, tables) in enumerate(comparison["actual_vs_expected"].items()):
        frames = {name: pd.DataFrame(t) for name, t in tables.items()}
        out["ave"][factor] = _embedded(
            figures.plot_actual_vs_expected(frames, folder / f"ave_{k}.png", factor=factor, caution=False)
        )
    for k, (factor, block) in enumerate(holdout["claims_ave"].items()):
        path = figures.plot_actual_vs_expected(
            block["tables"], folder / f"claims_ave_{k}.png", factor=factor, caution=False
        )
        out["claims_ave"][factor] = _embedded(path)
    return out


def render(context: dict, images: dict[str, Any]) -> str:
    """The report's HTML from the context and the figures' data URIs (Jinja2, autoescaped).

    Parameters
    ----------
    context : dict
        `report_context`'s sections.
    images : dict
        Data URIs of the figures by section and key (`_draw`).

    Returns
    -------
    str
        One self-contained HTML page.
    """
    from jinja2 import Environment, PackageLoader, StrictUndefined

    env = Environment(
        loader=PackageLoader("premiumlab.review", "templates"),
        autoescape=True,
        undefined=StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    legend = [(SERIES_WORDS.get(key, key), colour) for key, colour in SERIES_COLOURS.items() if key in SERIES_WORDS]
    return env.get_template("report.html.j2").render(c=context, images=images, sections=SECTIONS, legend=legend)


def _inputs(
    run: Run, table: Path | None, current: Path | None, book: Path | None, tails: Path | None
) -> tuple[Path, ...]:
    """The files and folders the report reads: the run's own files (not the whole run folder, where
    the report is written by default), its book (the one given, else the one run.json records),
    the tables."""
    files = run.files
    read = [files.manifest, files.levels, files.predictions, files.metrics, files.comparison, files.interactions]
    read += [files.experience]
    read += [files.models, files.certificate, run.book_path(book)]
    return tuple(p for p in (*read, table, current, book, tails) if p is not None)


def write_report(
    run_dir: str | Path,
    table: str | Path | None = None,
    *,
    current: str | Path | None = None,
    book: str | Path | None = None,
    tails: str | Path | None = None,
    out: str | Path | None = None,
    force: bool = False,
) -> Path:
    """Write the review report of a run (docs/commands.md, report); returns its path.

    Parameters
    ----------
    run_dir : str or Path
        A run directory written by `fit` (run `compare` first for the holdout section).
    table : str or Path or None
        A rating table made from the run: its factors, fidelity, audit and bands in the charts.
    current : str or Path or None
        The current rating table: current relativities and the change per row of the table.
    book : str or Path or None
        A book for the impact section.
    tails : str or Path or None
        The JSON object `tails --json` printed, saved to a file: the report's tails section.
    out : str or Path or None
        The HTML file to write; None for RUN/report.html.
    force : bool
        Replace an existing file.

    Returns
    -------
    Path
        The report written.

    Raises
    ------
    InputError
        Not a run directory, an unreadable table, a target that exists without `force`, or a target
        that is or lies inside an input.
    """
    run = open_run(run_dir)
    tables = [None if p is None else Path(p) for p in (table, current, book, tails)]
    target = run.files.report if out is None else Path(out)
    inputs = _inputs(run, *tables)
    if target.suffix.lower() not in (".html", ".htm"):
        raise InputError(f"{target}: the report is an HTML file; name it NAME.html")
    check_target(target, force, inputs)  # refused before the work, not after it
    context = report_context(run, *tables)
    with tempfile.TemporaryDirectory(prefix="premiumlab-report-") as folder:
        images = _draw(context, Path(folder))
    page = render(context, images)
    with atomic_output(target, force=force, kind="file", inputs=inputs) as tmp:
        tmp.write_text(page, encoding="utf-8")
    return target
