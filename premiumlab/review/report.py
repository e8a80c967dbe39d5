"""`report`: one self-contained HTML file (figures embedded) summarising a run and its comparison,
its warnings first."""

from __future__ import annotations

import base64
import html
from pathlib import Path

from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.jsonio import read_json
from premiumlab.evaluation.diagnostics import figure_text
from premiumlab.runs.diagnostics import merge_diagnostics, model_warnings
from premiumlab.runs.rundir import Run, RunDir, model_name, open_run

#: The figures of each model in the holdout comparison, in column order.
_METRICS = ("mean_deviance", "d2", "gini", "balance", "deviance_to_null")
#: The file of a table folder where `tabulate` writes its fidelity and diagnostics.
FIDELITY_FILE = "fidelity.json"


def _table(header: list[str], rows: list[list[str]]) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _figure(path: Path) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return (
        f'<figure><img alt="{html.escape(path.stem)}" src="data:image/png;base64,{data}">'
        f"<figcaption>{html.escape(path.stem.replace('_', ' '))}</figcaption></figure>"
    )


def _glm_section(files: RunDir) -> str:
    parts = []
    for target in files.model_targets("glm"):
        name = model_name("glm", target)
        m = read_json(files.model_json("glm", target))
        rows = [
            [
                c["term"],
                figure_text(c["estimate"], ".4f"),
                figure_text(c["std_error"], ".4f"),
                figure_text(c["p_value"], ".3g"),
            ]
            for c in m["coefficients"]
        ]
        power = "" if m.get("power") is None else f", power {m['power']:.2f}"
        parts.append(
            f"<h3>{html.escape(name)} ({html.escape(m['family'])}{power})</h3>"
            f"<p>deviance {figure_text(m['deviance'], '.6g')} on {m['df_resid']} df; null deviance "
            f"{figure_text(m['null_deviance'], '.6g')}; AIC {figure_text(m['aic'], '.6g')}</p>"
            + _table(["term", "estimate", "std. error", "p-value"], rows)
        )
    return "".join(parts)


def _warnings_section(run: Run, comparison: dict | None, table: Path | None) -> str:
    """Every diagnostic of the run, its GLMs, its comparison and the table, once each with the file
    that first lists it; or "None" said explicitly, with what was looked at."""
    sources: list[tuple[str, list]] = [
        ("run.json", run.manifest.get("diagnostics", [])),
        ("models/glm_*.json", model_warnings(run.files)),
    ]
    if comparison is not None:
        sources.append(("comparison.json", comparison.get("diagnostics", [])))
    if table is not None:
        sources.append((f"{table.name}/{FIDELITY_FILE}", read_json(table / FIDELITY_FILE).get("diagnostics", [])))
    first: dict[Diagnostic, str] = {}
    for name, found in sources:
        for d in merge_diagnostics(found):
            first.setdefault(d, name)
    looked = ", ".join(name for name, _ in sources)
    missing = "" if comparison is not None else " Run <code>premiumlab compare</code> for the holdout checks."
    if not first:
        return f"<h2>Warnings</h2><p><strong>None</strong> in {html.escape(looked)}.{missing}</p>"
    rows = [[d.kind, d.model, d.factor or "", d.level or "", d.message, where] for d, where in first.items()]
    return (
        f'<h2>Warnings</h2><div class="warnings"><p><strong>{len(rows)} warning(s)</strong> that a result '
        f"is unreliable, from {html.escape(looked)}.{missing}</p>"
        + _table(["kind", "model", "factor", "level", "message", "file"], rows)
        + "</div>"
    )


def write_report(run_dir: str | Path, table: str | Path | None = None) -> Path:
    """Write RUN/report.html from run.json, metrics and comparison.json (run `compare` first for
    figures and intervals); returns the path.

    The first section lists every warning that a result is unreliable (`Diagnostic`): run.json's
    `diagnostics`, the GLM models' `warnings`, comparison.json's `diagnostics` and, with `table`,
    TABLE/fidelity.json's; each once; or says there is none.

    Parameters
    ----------
    run_dir : str or Path
        A run directory written by `fit`.
    table : str or Path or None
        A rating table folder made from the run (its fidelity.json is read).

    Returns
    -------
    Path
        RUN/report.html, one self-contained HTML file (figures embedded as base64 PNG).

    Raises
    ------
    InputError
        Not a run directory, or a table folder without a readable fidelity.json.
    """
    run = open_run(run_dir)
    manifest = run.manifest
    comparison = read_json(run.files.comparison) if run.files.comparison.exists() else None
    cautions = "".join(f"<li>{html.escape(c)}</li>" for c in manifest["cautions"])
    sections = [
        f"<h1>premiumlab run: {html.escape(run.path.name)}</h1>",
        _warnings_section(run, comparison, None if table is None else Path(table)),
        f'<div class="caution"><strong>Cautions</strong><ul>{cautions}</ul></div>',
        "<h2>Book</h2>"
        + _table(
            ["rows", "training", "holdout", "book sha256"],
            [
                [
                    str(manifest["rows"]["total"]),
                    str(manifest["rows"]["train"]),
                    str(manifest["rows"]["holdout"]),
                    manifest["book"]["sha256"][:16] + "...",
                ]
            ],
        ),
    ]
    if manifest["warnings"]:
        sections.append(
            "<h2>Data warnings</h2><ul>" + "".join(f"<li>{html.escape(w)}</li>" for w in manifest["warnings"]) + "</ul>"
        )
    if comparison is not None:
        rows = []
        for t, block in comparison["metrics"].items():
            if "null" in block:
                rows.append([t, "null (constant rate)", figure_text(block["null"]["mean_deviance"], ".6g"), *[""] * 4])
            rows += [
                [t, name] + [figure_text(m.get(k), f) for k, f in zip(_METRICS, (".6g", ".4f", ".4f", ".4f", ".4g"))]
                for name, m in block["models"].items()
            ]
        sections.append(
            "<h2>Holdout comparison</h2><p>The null model is the training rows' constant rate; "
            "a model above 1 in the last column is worse than it.</p>"
            + _table(["target", "model", "mean deviance", "D^2", "Gini", "balance", "mean deviance / null"], rows)
        )
        diff_rows = [
            [
                name,
                figure_text(d["deviance_reduction"]["estimate"], ".5g"),
                f"[{figure_text(d['deviance_reduction']['lower'], '.5g')}, "
                f"{figure_text(d['deviance_reduction']['upper'], '.5g')}]",
                figure_text(d["gini_gain"]["estimate"], ".4f"),
                f"[{figure_text(d['gini_gain']['lower'], '.4f')}, {figure_text(d['gini_gain']['upper'], '.4f')}]",
            ]
            for name, d in comparison["differences"].items()
        ]
        sections.append(
            "<h3>Differences, paired bootstrap 95 % intervals</h3>"
            + _table(["comparison", "deviance reduction", "interval", "Gini gain", "interval"], diff_rows)
        )
        figs = sorted(run.files.figures.glob("*.png"))
        sections.append("<h2>Figures</h2>" + "".join(_figure(f) for f in figs))
    else:
        sections.append(
            "<p>Run <code>premiumlab compare</code> on this run for the holdout comparison and its figures.</p>"
        )
    sections.append("<h2>GLM baselines</h2>" + _glm_section(run.files))
    style = (
        "body{font-family:Georgia,serif;max-width:1000px;margin:2em auto;color:#222}"
        "table{border-collapse:collapse;margin:0.5em 0 1.5em}td,th{border-bottom:1px solid #ccc;"
        "padding:3px 10px;text-align:right}th{background:#f1efe8}.caution{border:2px solid #a33;"
        "padding:0.5em 1em;background:#fbf3f1}figure{display:inline-block;margin:0.5em;width:470px}"
        "img{width:100%}.warnings{border:2px solid #b60;padding:0.5em 1em;background:#fdf6ec}"
        ".warnings td{text-align:left}"
    )
    page = (
        f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><title>premiumlab run '
        f"{html.escape(run.path.name)}</title><style>{style}</style></head><body>"
        + "".join(sections)
        + "</body></html>\n"
    )
    out = run.files.report
    out.write_text(page, encoding="utf-8")
    return out
