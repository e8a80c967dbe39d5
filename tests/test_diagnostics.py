"""Diagnostics reach the user (issue 14, item 5): `compare` measures every model against the null
model and warns of models worse than it, of absurd figures and of GLM relativities outside the
plausibility bounds; `fit` prints run.json's diagnostics; `report` opens with a Warnings section;
`audit` checks default bounds and remarks on promises kept by flattening.

The run is a tiny book fitted once with a minimal search; a model is then made worse than the null
model by hand (its holdout frequency predictions multiplied by 30) and a GLM relativity set to 0.001,
so the warnings are certain whatever the fit.
"""

from __future__ import annotations

import dataclasses
import json
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import premiumlab
import premiumlab.api as api
import rating_tables
from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError
from premiumlab.cli.app import app
from premiumlab.cli.format import diagnostic_lines
from premiumlab.evaluation.diagnostics import figure_text, metric_diagnostics, relativity_diagnostics
from premiumlab.runs.diagnostics import merge_diagnostics, model_warnings
from premiumlab.runs.rundir import RunDir
from rating_tables import CategoricalFactor

from _builders import SPEC_TEXT, example_table, run_cli, small_book

TINY_SEARCH = "\n[gbm]\nfolds = 2\nmax_settings = 1\nmax_rounds = 50\n"
#: What the GLM step and the fit step would write: one in a model JSON, repeated in run.json.
NON_CONVERGENCE = Diagnostic("non_convergence", "glm_frequency", "IRLS stopped after 100 iterations")
UNSEEN = Diagnostic("unseen_levels", "book", "2 holdout rows with levels unseen in training", "region", "Westholm")


@pytest.fixture(scope="module")
def broken_run(tmp_path_factory) -> dict[str, Path]:
    """A tiny run, then broken by hand: glm_frequency x 30 on the holdout, a GLM relativity of 0.001,
    a model warning and run.json diagnostics (one a copy of the model's)."""
    base = tmp_path_factory.mktemp("diag")
    (base / "spec.toml").write_text(SPEC_TEXT + TINY_SEARCH)
    small_book(600).to_csv(base / "book.csv", index=False)
    run = premiumlab.fit(base / "book.csv", spec=base / "spec.toml", out=base / "run").path
    preds = pd.read_parquet(run / "predictions.parquet")
    preds.loc[preds["holdout"], "glm_frequency"] *= 30.0
    preds.to_parquet(run / "predictions.parquet", index=False)
    model = json.loads((run / "models" / "glm_frequency.json").read_text())
    model["relativities"]["region"]["Southby"] = 0.001
    model["warnings"] = [NON_CONVERGENCE.to_dict()]
    (run / "models" / "glm_frequency.json").write_text(json.dumps(model))
    manifest = json.loads((run / "run.json").read_text())
    manifest["diagnostics"] = [NON_CONVERGENCE.to_dict(), UNSEEN.to_dict()]
    (run / "run.json").write_text(json.dumps(manifest))
    done = run_cli("compare", str(run))
    assert done.returncode == 0, done.stderr
    return {"base": base, "run": run, "stdout": done.stdout, "stderr": done.stderr}


def test_fit_writes_the_model_warnings_into_run_json(tmp_path):
    """run.json's `diagnostics` gathers the GLM model JSONs' `warnings`, each once, and the extras."""
    files = RunDir(tmp_path)
    files.models.mkdir()
    for target in ("frequency", "pure_premium"):
        files.model_json("glm", target).write_text(json.dumps({"warnings": [NON_CONVERGENCE.to_dict()]}))
    files.model_json("glm", "severity").write_text("{}")  # a model without warnings
    assert model_warnings(files) == [NON_CONVERGENCE]
    assert merge_diagnostics(model_warnings(files), [UNSEEN.to_dict(), NON_CONVERGENCE]) == [NON_CONVERGENCE, UNSEEN]
    with pytest.raises(ValueError, match="unknown diagnostic kind"):
        merge_diagnostics([{"kind": "bad", "model": "m", "message": "x"}])


def test_null_model_is_the_training_rate_and_its_deviance_matches_references(broken_run):
    """The null model is the intercept-only Poisson GLM with offset log(exposure) on the training rows
    (statsmodels: its fitted rate exp(const)); its holdout mean deviance is scikit-learn's
    mean_poisson_deviance of that constant, weighted by exposure; the same for the Tweedie pure
    premium at the run's power (mean_tweedie_deviance)."""
    import statsmodels.api as sm
    from sklearn.metrics import mean_poisson_deviance, mean_tweedie_deviance

    comp = json.loads((broken_run["run"] / "comparison.json").read_text())
    preds = pd.read_parquet(broken_run["run"] / "predictions.parquet")
    train, hold = preds[~preds["holdout"]], preds[preds["holdout"]]
    glm = sm.GLM(
        train["claim_count"], np.ones((len(train), 1)), family=sm.families.Poisson(), offset=np.log(train["exposure"])
    )
    rate = float(np.exp(glm.fit().params.iloc[0]))
    null = comp["metrics"]["frequency"]["null"]
    assert null["rate"] == pytest.approx(rate, rel=1e-8)
    y, w = hold["claim_count"] / hold["exposure"], hold["exposure"]
    assert null["mean_deviance"] == pytest.approx(
        mean_poisson_deviance(y, np.full(len(y), rate), sample_weight=w), rel=1e-10
    )
    power = comp["tweedie_power"]
    pp_rate = train["claim_amount"].sum() / train["exposure"].sum()
    pp = comp["metrics"]["pure_premium"]["null"]
    assert pp["rate"] == pytest.approx(pp_rate, rel=1e-12)
    ref = mean_tweedie_deviance(hold["claim_amount"] / w, np.full(len(w), pp_rate), sample_weight=w, power=power)
    assert pp["mean_deviance"] == pytest.approx(ref, rel=1e-10)
    glm_freq = comp["metrics"]["frequency"]["models"]["glm_frequency"]
    assert glm_freq["deviance_to_null"] == pytest.approx(glm_freq["mean_deviance"] / null["mean_deviance"], rel=1e-12)
    assert glm_freq["deviance_to_null"] > 1  # frequencies 30 times too high on the holdout


def test_compare_writes_and_prints_the_warnings(broken_run):
    comp = json.loads((broken_run["run"] / "comparison.json").read_text())
    found = [Diagnostic.from_dict(d) for d in comp["diagnostics"]]
    assert found.count(NON_CONVERGENCE) == 1 and UNSEEN in found  # from run.json and the model, once
    worse = [d for d in found if d.kind == "worse_than_null"]
    assert "glm_frequency" in {d.model for d in worse}
    bounds = [d for d in found if d.kind == "relativity_bounds"]
    assert [(d.model, d.factor, d.level) for d in bounds] == [("glm_frequency", "region", "Southby")]
    assert "0.001" in bounds[0].message and "[0.2, 5] (a common-practice default)" in bounds[0].message
    warnings = [line for line in broken_run["stderr"].splitlines() if line.startswith("warning:")]
    assert any(line.startswith("warning: worse_than_null: glm_frequency: frequency holdout") for line in warnings)
    assert (
        "warning: relativity_bounds: glm_frequency, factor 'region', level 'Southby': relativity 0.001"
        in (broken_run["stderr"])
    )
    assert "warning: non_convergence: glm_frequency: IRLS stopped" in broken_run["stderr"]
    flagged = [line for line in broken_run["stdout"].splitlines() if line.split()[1:2] == ["glm_frequency"]]
    assert flagged and flagged[0].endswith(" !")
    assert broken_run["stderr"].rstrip().splitlines()[-1].startswith("caution: ")


def test_absurd_and_non_finite_metrics_are_flagged():
    """The issue's figures: a mean deviance of 6.9e19 against a null of 0.41 and D^2 of -3.1e17."""
    metrics = {
        "frequency": {
            "null": {"rate": 0.083, "mean_deviance": 0.41},
            "models": {
                "glm_frequency": {"mean_deviance": 6.9e19, "d2": -3.1e17, "deviance_to_null": 6.9e19 / 0.41},
                "gbm_frequency": {"mean_deviance": 0.40, "d2": 0.02, "deviance_to_null": 0.40 / 0.41},
                "glm_freq_x_sev": {"mean_deviance": None, "d2": None, "deviance_to_null": None},
                "gbm_freq_x_sev": {"mean_deviance": 0.40, "d2": -1.5, "deviance_to_null": 0.40 / 0.41},
            },
        }
    }
    found = metric_diagnostics(metrics)
    assert [(d.kind, d.model) for d in found] == [
        ("worse_than_null", "glm_frequency"),
        ("worse_than_null", "glm_freq_x_sev"),
        ("worse_than_null", "gbm_freq_x_sev"),
    ]
    assert "1.68e+20 times the null model's 0.41" in found[0].message and "absurd" in found[0].message
    assert "not a finite number" in found[1].message
    assert "D^2 -1.5 is below -1" in found[2].message


def test_relativity_bounds_skip_controls_and_flag_non_finite():
    rels = {"territory": {"T1": 1.0, "T2": 1.6e-44, "T3": 42.6, "T4": None}, "year": {"2024": 9.0}}
    found = relativity_diagnostics("glm_pure_premium", rels, (0.2, 5.0), control=["year"])
    assert [d.level for d in found] == ["T2", "T3", "T4"]
    assert "not finite" in found[2].message
    assert relativity_diagnostics("glm_pure_premium", rels, (1e-50, 50.0), control=["year"])[0].level == "T4"


def test_diagnostic_lines_group_by_kind_and_model_and_count_the_rest():
    many = [Diagnostic("relativity_bounds", "glm_frequency", f"relativity {i}", "territory", f"T{i}") for i in range(7)]
    lines = diagnostic_lines([NON_CONVERGENCE, *many, UNSEEN.to_dict()], source="RUN/run.json", shown=3)
    assert lines[0] == "warning: non_convergence: glm_frequency: IRLS stopped after 100 iterations"
    assert lines[1] == "warning: relativity_bounds: glm_frequency, factor 'territory', level 'T0': relativity 0"
    assert lines[4] == "warning: relativity_bounds: glm_frequency: and 4 more (all in RUN/run.json)"
    assert lines[5].startswith("warning: unseen_levels: book, factor 'region', level 'Westholm'")
    assert len(lines) == 6


def test_fit_prints_the_run_diagnostics_at_the_end(monkeypatch, tmp_path):
    """`fit`'s terminal: "wrote RUN" on stdout, then run.json's diagnostics on stderr, grouped."""
    many = [Diagnostic("separation", "glm_frequency", "no claims", "territory", f"T{i}").to_dict() for i in range(5)]
    files = RunDir(tmp_path / "run")
    fake = type("FakeRun", (), {"path": files.path, "files": files, "manifest": {"diagnostics": many}})
    monkeypatch.setattr(api, "fit", lambda *args, **kwargs: fake)
    done = CliRunner().invoke(app, ["fit", "book.csv", "--spec", "spec.toml", "--out", str(files.path)])
    assert done.exit_code == 0, done.output
    assert done.stdout == f"wrote {files.path}\n"
    assert done.stderr.splitlines() == [
        "warning: separation: glm_frequency, factor 'territory', level 'T0': no claims",
        "warning: separation: glm_frequency, factor 'territory', level 'T1': no claims",
        "warning: separation: glm_frequency, factor 'territory', level 'T2': no claims",
        f"warning: separation: glm_frequency: and 2 more (all in {files.manifest})",
    ]


class _Headings(HTMLParser):
    """The report's h2 headings and its first figure, in document order, and the Warnings rows."""

    def __init__(self) -> None:
        super().__init__()
        self.events: list[str] = []
        self.rows: list[list[str]] = []
        self._tag: str | None = None
        self._section = ""

    def handle_starttag(self, tag, attrs):
        self._tag = tag
        if tag == "figure":
            self.events.append("<figure>")
        if tag == "tr" and self._section == "Warnings":
            self.rows.append([])

    def handle_endtag(self, tag):
        self._tag = None

    def handle_data(self, data):
        if self._tag == "h2":
            self._section = data
            self.events.append(data)
        elif self._tag == "td" and self._section == "Warnings":
            self.rows[-1].append(data)
        elif self._section == "Warnings" and data.strip():
            self.events.append(f"Warnings: {data.strip()}")


def test_report_opens_with_every_warning(broken_run, tmp_path):
    table = premiumlab.tabulate(broken_run["run"], out=tmp_path / "table", model="glm").table
    retention = Diagnostic("retention_undefined", "table", "G_gbm - G_glm = -0.02 <= 0")
    fidelity = json.loads((table / "fidelity.json").read_text())
    fidelity["diagnostics"] = [retention.to_dict()]  # planted: a GLM table has no retention to warn of
    (table / "fidelity.json").write_text(json.dumps(fidelity))
    page = _Headings()
    page.feed(premiumlab.report(broken_run["run"], table=table).report.read_text())
    headings = [e for e in page.events if not e.startswith("Warnings: ")]
    assert headings[:2] == ["Summary", "Warnings"] and headings.index("Warnings") < headings.index("<figure>")
    kinds = [(row[0], row[1], row[-1]) for row in page.rows if row]
    assert ("non_convergence", "glm_frequency", "run.json") in kinds
    assert ("unseen_levels", "book", "run.json") in kinds
    assert ("relativity_bounds", "glm_frequency", "comparison.json") in kinds
    assert ("worse_than_null", "glm_frequency", "comparison.json") in kinds
    assert ("retention_undefined", "table", "table/fidelity.json") in kinds
    assert len(kinds) == len(set(kinds))


def test_report_says_none_when_there_is_no_warning(tmp_path):
    """A run whose diagnostics and model warnings were all cleared, without a comparison: "None", and
    the advice to run compare."""
    (tmp_path / "spec.toml").write_text(SPEC_TEXT + TINY_SEARCH)
    small_book(600).to_csv(tmp_path / "book.csv", index=False)
    run = premiumlab.fit(tmp_path / "book.csv", spec=tmp_path / "spec.toml", out=tmp_path / "run").path
    manifest = json.loads((run / "run.json").read_text())
    manifest["diagnostics"] = []
    (run / "run.json").write_text(json.dumps(manifest))
    for model in (run / "models").glob("glm_*.json"):
        m = json.loads(model.read_text())
        m["warnings"] = []
        model.write_text(json.dumps(m))
    html = premiumlab.report(run).report.read_text()
    page = _Headings()
    page.feed(html)
    assert "Warnings: None" in page.events
    assert "run `premiumlab compare RUN` for the holdout checks" in html


def _save(tmp_path: Path, **factors) -> Path:
    table = example_table()
    folder = tmp_path / "T"
    rating_tables.save(dataclasses.replace(table, factors=tuple(factors.get(f.name, f) for f in table.factors)), folder)
    return folder


def test_audit_fails_a_relativity_of_0_001_by_default(tmp_path):
    region = CategoricalFactor(
        "region", "none", ("North", "South", "Coast"), [1.0, 0.001, 1.5], [600.0, 400.0, 220.0], "North", "North"
    )
    folder = _save(tmp_path, region=region)
    result = premiumlab.audit(folder)
    assert result.bounds == (0.2, 5.0)
    assert result.violations == (
        "bounds: factor 'region', South: relativity 0.001 is below the minimum 0.2 (by 0.199)",
    )
    done = run_cli("audit", str(folder))
    assert done.returncode == 1
    assert done.stdout.splitlines()[-1].endswith("(relativity bounds [0.2, 5], a common-practice default)")
    assert premiumlab.audit(folder, no_bounds=True).violations == ()
    assert premiumlab.audit(folder, bounds=(0.0005, 50.0)).violations == ()
    with pytest.raises(InputError, match=r"--bounds: 5 0\.2 must be finite with 0 < LOW < HIGH"):
        premiumlab.audit(folder, bounds=(5.0, 0.2))


def test_a_promise_kept_by_flattening_is_a_warning_not_a_violation(tmp_path):
    """bonus promised increasing, four grades 0.75, 1, 1, 1: grades 02 to 04 share one relativity."""
    bonus = CategoricalFactor("bonus", "increasing", ("01", "02", "03", "04"), [0.75, 1.0, 1.0, 1.0], [1.0] * 4)
    folder = _save(tmp_path, bonus=bonus)
    result = premiumlab.audit(folder)
    assert result.violations == ()
    assert [(d.kind, d.model, d.factor, d.level) for d in result.diagnostics] == [
        ("flattened_promise", "table", "bonus", "02; 03; 04")
    ]
    done = run_cli("audit", str(folder))
    assert done.returncode == 0, done.stderr
    assert (
        "warning: flattened_promise: table, factor 'bonus', level '02; 03; 04': promised increasing, kept by "
        "giving 3 adjacent levels one relativity, 1"
    ) in done.stderr


def test_every_kind_is_documented_with_its_meaning():
    """docs/run-directory.md repeats each kind of `KINDS` with its one-line meaning."""
    from premiumlab._core.diagnostics import KINDS

    page = (Path(__file__).resolve().parents[1] / "docs" / "run-directory.md").read_text(encoding="utf-8")
    assert [kind for kind, meaning in KINDS.items() if f"| `{kind}` | {meaning} |" not in page] == []


def test_figures_that_are_no_numbers_or_absurd_are_not_printed_digit_by_digit():
    assert figure_text(0.0105, ">8.4f") == "  0.0105"
    assert figure_text(-2.871e22, ">8.4f") == "-2.87e+22"  # not -28710000000000000000000.0000
    assert figure_text(None, ">8.4f") == "     n/a"
    assert figure_text(float("inf"), ".5g") == "n/a"


def test_a_factor_held_at_base_by_the_pure_premium_glm_only_is_flagged() -> None:
    """held_at_base: a pure-premium tau below 0.01 is flagged only where the frequency GLM's tau is
    above 0.05; the uncapped 60,000-policy property book gave territory taus 1e-4 and 0.244
    (measured when written), which is the first case here."""
    from premiumlab.runs.diagnostics import held_at_base

    credibility = {
        "frequency": {"territory": {"tau": 0.244}, "alarm": {"tau": 0.03}, "age": {"tau": 0.2}},
        "pure_premium": {"territory": {"tau": 1e-4}, "alarm": {"tau": 1e-4}, "age": {"tau": 0.02}},
    }
    found = held_at_base(credibility)
    assert [(d.kind, d.model, d.factor) for d in found] == [("held_at_base", "glm_pure_premium", "territory")]
    assert "tau 0.0001" in found[0].message and "tau 0.24" in found[0].message
    assert held_at_base({"pure_premium": credibility["pure_premium"]}) == []


def test_the_report_embeds_no_file_it_did_not_draw(broken_run, tmp_path):
    """A link planted in RUN/figures to another file (here the book) is never embedded: the report
    draws its own figures into a private folder (issue 11: nothing from disk leaks into a document
    that is sent out)."""
    import base64

    secret = tmp_path / "secret.png"
    secret.write_bytes(b"\x89PNG\r\n\x1a\nnot-for-the-report-" + bytes(range(64)))
    link = broken_run["run"] / "figures" / "zz_planted.png"
    link.symlink_to(secret)
    try:
        page = premiumlab.report(broken_run["run"], out=tmp_path / "r.html").report.read_text()
    finally:
        link.unlink()
    assert base64.b64encode(secret.read_bytes()).decode()[:40] not in page
    assert "zz_planted" not in page
