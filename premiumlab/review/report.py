"""`report`: one self-contained HTML file (figures embedded) summarising a run and its comparison."""

from __future__ import annotations

import base64
import html
from pathlib import Path

from premiumlab._core.jsonio import read_json
from premiumlab.runs.rundir import RunDir, model_name, open_run


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


def _or_dash(value: float | None, spec: str) -> str:
    """A figure in `spec`, or a dash where the model JSON has none (null: not meaningful)."""
    return "-" if value is None else format(value, spec)


def _glm_section(files: RunDir) -> str:
    parts = []
    for target in files.model_targets("glm"):
        name = model_name("glm", target)
        m = read_json(files.model_json("glm", target))
        rows = [
            [c["term"], f"{c['estimate']:.4f}", _or_dash(c["std_error"], ".4f"), _or_dash(c["p_value"], ".3g")]
            for c in m["coefficients"]
        ]
        power = "" if m.get("power") is None else f", power {m['power']:.2f}"
        parts.append(
            f"<h3>{html.escape(name)} ({html.escape(m['family'])}{power})</h3>"
            f"<p>deviance {m['deviance']:.6g} on {m['df_resid']} df; null deviance "
            f"{m['null_deviance']:.6g}; AIC {m['aic']:.6g}</p>"
            + _table(["term", "estimate", "std. error", "p-value"], rows)
        )
    return "".join(parts)


def write_report(run_dir: str | Path) -> Path:
    """Write RUN/report.html from run.json, metrics and comparison.json (run `compare` first for
    figures and intervals); returns the path.

    Parameters
    ----------
    run_dir : str or Path
        A run directory written by `fit`.

    Returns
    -------
    Path
        RUN/report.html, one self-contained HTML file (figures embedded as base64 PNG).

    Raises
    ------
    InputError
        Not a run directory.
    """
    run = open_run(run_dir)
    manifest = run.manifest
    comparison = read_json(run.files.comparison) if run.files.comparison.exists() else None
    cautions = "".join(f"<li>{html.escape(c)}</li>" for c in manifest["cautions"])
    sections = [
        f"<h1>premiumlab run: {html.escape(run.path.name)}</h1>",
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
        rows = [
            [t, name, f"{m['mean_deviance']:.6g}", f"{m['d2']:.4f}", f"{m['gini']:.4f}", f"{m['balance']:.4f}"]
            for t, block in comparison["metrics"].items()
            for name, m in block["models"].items()
        ]
        sections.append(
            "<h2>Holdout comparison</h2>" + _table(["target", "model", "mean deviance", "D^2", "Gini", "balance"], rows)
        )
        diff_rows = [
            [
                name,
                f"{d['deviance_reduction']['estimate']:.5g}",
                f"[{d['deviance_reduction']['lower']:.5g}, {d['deviance_reduction']['upper']:.5g}]",
                f"{d['gini_gain']['estimate']:.4f}",
                f"[{d['gini_gain']['lower']:.4f}, {d['gini_gain']['upper']:.4f}]",
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
        "img{width:100%}"
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
