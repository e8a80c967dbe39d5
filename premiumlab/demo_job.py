"""`demo`: the whole job on the built-in motor scenario, into one folder.

DIR/book.parquet and truth.json (simulated), spec.toml (the scenario's spec with a lighter
boosted-model search), run/ (models, comparison, figures,
report.html), table/ (distilled from the boosted model, with its two-way table), glm_table/ (the
GLM's relativities), priced.parquet (the book rated with table/), impact.json and impact.png (dislocation
from the GLM table to the distilled one).
"""
from __future__ import annotations

from importlib import resources
from pathlib import Path
from typing import Callable

from premiumlab._core.cluster import parse_cluster
from premiumlab._core.outputs import check_target

SCENARIO = "motor"
#: The demo's boosted-model search: 3 folds x 4 settings instead of the default 5 x 8, which takes
#: several times longer on a two-core laptop; written into the demo's spec.toml for all to see.
DEMO_SEARCH = """
[gbm]
# a lighter search than the defaults (folds = 5, max_settings = 8) keeps the demo to a few minutes;
# delete this section for the full search
folds = 3
max_settings = 4
"""


def scenario_file(name: str) -> Path:
    """Path of a shipped scenario file, e.g. scenario_file("motor.toml")."""
    return Path(str(resources.files("premiumlab.scenarios").joinpath(name)))


def run_demo(out: str | Path, policies: int | None = None, force: bool = False,
             echo: Callable[[str], None] = print, cluster: str | None = None) -> Path:
    """Simulate the motor book, then fit, compare, tabulate, audit, rate and measure the impact."""
    from premiumlab.review.comparison import compare, summary_lines
    from premiumlab.evaluation.figures import plot_impact
    from premiumlab._core.jsonio import write_json
    from premiumlab._core.outputs import atomic_output
    from premiumlab.runs.fit import fit
    from premiumlab.apply.glue import (audit_table, dislocation, fidelity_lines, impact_lines, rate_book)
    from premiumlab.review.report import write_report
    from premiumlab.simulation.simulator import simulate
    from premiumlab.tabulation.from_run import tabulate

    out = Path(out)
    check_target(out, force)
    if cluster is not None:
        parse_cluster(cluster)
    with atomic_output(out, force=force) as tmp:
        book, spec = tmp / "book.parquet", tmp / "spec.toml"
        spec.write_text(scenario_file(f"{SCENARIO}_spec.toml").read_text(encoding="utf-8") + DEMO_SEARCH,
                        encoding="utf-8")
        sim = simulate(scenario_file(f"{SCENARIO}.toml"), book, policies=policies)
        echo(f"[1/7] simulated {sim['policies']} policies ({sim['rows']} rows) of an invented motor book")
        run = fit(book, spec, tmp / "run", progress=True, cluster=cluster)
        echo("[2/7] fitted GLM baselines and boosted models")
        echo("\n".join(summary_lines(compare(run))))
        echo("[3/7] compared on the holdout")
        summary = tabulate(run, tmp / "table", model="gbm")
        echo("\n".join(fidelity_lines(summary)))
        tabulate(run, tmp / "glm_table", model="glm")
        echo("[4/7] distilled the boosted model into table/ and exported the GLM as glm_table/")
        found = audit_table(tmp / "table", spec, run)
        echo("\n".join(found) if found else "[5/7] audit: no violations in table/")
        rate_book(tmp / "table", book, tmp / "priced.parquet", "exposure", annual=False)
        echo("[6/7] rated the book into priced.parquet")
        result = dislocation(str(tmp / "glm_table"), str(tmp / "table"), book, "exposure", False, 0.15,
                             (0.05, 0.10, 0.25))
        write_json(tmp / "impact.json", result)
        plot_impact(result, tmp / "impact.png")
        echo("\n".join(impact_lines(result)))
        write_report(run)
        echo("[7/7] impact of moving from the GLM table written to impact.json and impact.png; report in "
             "run/report.html")
        for c in summary["cautions"]:
            echo(f"caution: {c}")
    echo(f"demo written to {out}")
    return out
