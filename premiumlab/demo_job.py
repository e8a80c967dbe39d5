"""`demo`: the whole job on the built-in motor scenario, into one folder.

DIR/book.parquet and truth.json (simulated), spec.toml (the scenario's spec with a lighter
boosted-model search), run/ (models, comparison, figures,
report.html), table/ (distilled from the boosted model, with its two-way table), glm_table/ (the
GLM's relativities), priced.parquet (the book rated with table/), impact.json and impact.png (dislocation
from the GLM table to the distilled one).
"""

from __future__ import annotations

from dataclasses import replace
from importlib import resources
from pathlib import Path

from premiumlab._core.cluster import parse_cluster
from premiumlab._core.outputs import check_target
from premiumlab._core.progress import Progress, Silent
from premiumlab.results import Comparison, DemoResult, TableResult

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


def _scenario_file(name: str) -> Path:
    """Path of a shipped scenario file, e.g. _scenario_file("motor.toml")."""
    return Path(str(resources.files("premiumlab.scenarios").joinpath(name)))


def run_demo(
    out: str | Path,
    policies: int | None = None,
    force: bool = False,
    progress: Progress | None = None,
    cluster: str | None = None,
) -> DemoResult:
    """Simulate the motor book, then fit, compare, tabulate, audit, rate and measure the impact.

    Parameters
    ----------
    out : str or Path
        Folder for the demo outputs (see the module docstring); written atomically.
    policies : int or None
        Policies in the demo book (None: the scenario's number).
    force : bool
        Replace an existing `out`.
    progress : Progress or None
        Told each step as it is done and the comparison, table and impact results (None: silent).
    cluster : str or None
        Where the GLMs' passes over the rows and the boosted-model search run
        (premiumlab._core.cluster: local:N or a scheduler address).

    Returns
    -------
    DemoResult
        The folder, the files written in it and the distilled table's cautions.
    """
    from premiumlab._core.jsonio import write_json
    from premiumlab._core.outputs import atomic_output
    from premiumlab.apply.audit import audit_table
    from premiumlab.apply.impact import dislocation
    from premiumlab.apply.rate import rate_book
    from premiumlab.evaluation.figures import plot_impact
    from premiumlab.review.comparison import compare
    from premiumlab.review.report import write_report
    from premiumlab.runs.fit import fit
    from premiumlab.simulation.simulator import simulate
    from premiumlab.tabulation.from_run import tabulate

    out = Path(out)
    check_target(out, force)
    if cluster is not None:
        parse_cluster(cluster)
    report = progress if progress is not None else Silent()
    with atomic_output(out, force=force) as tmp:
        book, spec = tmp / "book.parquet", tmp / "spec.toml"
        spec.write_text(
            _scenario_file(f"{SCENARIO}_spec.toml").read_text(encoding="utf-8") + DEMO_SEARCH, encoding="utf-8"
        )
        sim = simulate(_scenario_file(f"{SCENARIO}.toml"), book, policies=policies)
        report.step(f"[1/7] simulated {sim['policies']} policies ({sim['rows']} rows) of an invented motor book")
        run = fit(book, spec, tmp / "run", progress=progress, cluster=cluster)
        report.step("[2/7] fitted GLM baselines and boosted models")
        report.result(Comparison.from_summary(compare(run)))
        report.step("[3/7] compared on the holdout")
        table = TableResult.from_summary(tabulate(run, tmp / "table", model="auto"))
        report.result(replace(table, table=out / "table"))  # the folder's name once the demo is done
        tabulate(run, tmp / "glm_table", model="glm")
        report.step(
            "[4/7] made table/ (with exhibit.xlsx) from the model best on the holdout and exported the GLM as glm_table/"
        )
        audit = audit_table(tmp / "table", spec, run)
        report.step(
            "\n".join([f"[5/7] audit: {len(audit.violations)} violation(s) in table/", *audit.violations])
            if audit.violations
            else "[5/7] audit: no violations in table/"
        )
        rate_book(tmp / "table", book, tmp / "priced.parquet", None, annual=False)  # the table's exposure column
        report.step("[6/7] rated the book into priced.parquet")
        impact = dislocation(str(tmp / "glm_table"), str(tmp / "table"), book, None, False, 0.15, (0.05, 0.10, 0.25))
        write_json(tmp / "impact.json", impact.to_dict())
        plot_impact(impact.to_dict(), tmp / "impact.png")
        report.result(impact)
        write_report(run, tmp / "table", current=tmp / "glm_table", book=book)  # the table, its selections, impact
        report.step("[7/7] measured the impact of moving from glm_table/ to table/ and wrote the report")
        files = tuple(sorted(p.relative_to(tmp).as_posix() for p in tmp.rglob("*") if p.is_file()))
    return DemoResult(out=out, files=files, cautions=table.cautions)
