"""The Python API mirrors the command line: one function per command, the command's arguments
positional, its options keyword-only with the same names and defaults; every result a frozen
dataclass whose `to_dict()` is JSON. Then one chain of calls on a small simulated book, its figures
checked against the files written and against the book itself."""

from __future__ import annotations

import dataclasses
import inspect
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import typer.main

import premiumlab
from premiumlab.cli.app import app
from rating_tables.table import DRAFT_CAUTION

ROOT = Path(__file__).resolve().parents[1]
COMMANDS = (
    "simulate",
    "validate",
    "fit",
    "compare",
    "tabulate",
    "select",
    "audit",
    "rate",
    "impact",
    "certify",
    "tails",
    "report",
    "demo",
)
#: Command-line options that only choose how the result is printed.
PRINT_ONLY = {"tails": {"as_json"}}
#: Keyword-only arguments the command line fills itself: the reporter of a long job.
API_ONLY = {"fit": {"progress"}, "demo": {"progress"}}
#: A light boosted-model search: the chain checks the plumbing, not the model.
QUICK_GBM = "\n[gbm]\nfolds = 2\nmax_settings = 1\nmax_rounds = 200\n"


def _plain_default(value):
    return os.fspath(value) if isinstance(value, os.PathLike) else value


def cli_params(name: str) -> list:
    command = typer.main.get_command(app).commands[name]
    return [p for p in command.params if p.name not in PRINT_ONLY.get(name, ())]


def test_every_command_has_its_function():
    group = typer.main.get_command(app)
    assert sorted(group.commands) == sorted(COMMANDS)
    for name in COMMANDS:
        assert callable(getattr(premiumlab, name))


@pytest.mark.parametrize("name", COMMANDS)
def test_the_signature_mirrors_the_command(name):
    signature = inspect.signature(getattr(premiumlab, name))
    mirrored = [p for p in signature.parameters.values() if p.name not in API_ONLY.get(name, ())]
    cli = cli_params(name)
    assert [p.name for p in mirrored] == [p.name for p in cli]
    for option, parameter in zip(cli, mirrored, strict=True):
        if option.param_type_name == "argument":
            assert parameter.kind is inspect.Parameter.POSITIONAL_OR_KEYWORD, parameter
            assert parameter.default is inspect.Parameter.empty, parameter
            continue
        assert parameter.kind is inspect.Parameter.KEYWORD_ONLY, parameter
        assert f"--{parameter.name.replace('_', '-')}" in option.opts, (parameter, option.opts)
        if option.required:
            assert parameter.default is inspect.Parameter.empty, parameter
        else:
            assert _plain_default(parameter.default) == _plain_default(option.default), parameter
    for extra in API_ONLY.get(name, ()):
        parameter = signature.parameters[extra]
        assert parameter.kind is inspect.Parameter.KEYWORD_ONLY and parameter.default is None


@pytest.mark.parametrize("name", COMMANDS)
def test_each_function_returns_a_frozen_dataclass_and_documents_itself(name):
    function = getattr(premiumlab, name)
    result_type = getattr(premiumlab, inspect.signature(function).return_annotation)
    assert dataclasses.is_dataclass(result_type) and result_type.__dataclass_params__.frozen
    assert callable(result_type.to_dict)
    doc = inspect.getdoc(function)
    assert "Parameters\n----------" in doc and "Returns\n-------" in doc
    for parameter in inspect.signature(function).parameters:
        assert f"\n{parameter} : " in doc, parameter


def test_the_package_lists_its_api():
    names = set(dir(premiumlab))
    result_types = {
        "SimulationResult",
        "ValidationReport",
        "Run",
        "Comparison",
        "TableResult",
        "SelectResult",
        "AuditResult",
        "RateResult",
        "ImpactResult",
        "Certificate",
        "TailFit",
        "ReportResult",
        "DemoResult",
    }
    assert {*COMMANDS, *result_types, "load_spec", "load_book", "open_run"} <= names
    for gone in ("validate_book", "write_report", "run_demo", "threshold_aid"):
        assert gone not in names and not hasattr(premiumlab, gone)


def test_the_command_line_loads_no_numeric_stack_before_a_command_and_then_uses_jemalloc(tmp_path):
    """`premiumlab --help` stays fast (the numeric stack is imported inside the commands) and the
    entry sets Arrow's jemalloc pool before a command first loads pyarrow."""
    probe = (
        "import sys\n"
        "from premiumlab.cli.app import app\n"
        "heavy = sorted(m for m in ('pandas', 'pyarrow', 'numpy', 'premiumlab.api') if m in sys.modules)\n"
        "print(','.join(heavy))\n"
    )
    env = {k: v for k, v in os.environ.items() if k != "ARROW_DEFAULT_MEMORY_POOL"}
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, env=env, check=True)
    assert done.stdout.strip() == ""
    if sys.platform == "win32":
        return
    try:
        import pyarrow

        pyarrow.jemalloc_memory_pool()
    except (ImportError, NotImplementedError):
        pytest.skip("this pyarrow has no jemalloc")
    book = tmp_path / "book.csv"
    pd.DataFrame({"x": [1.0]}).to_csv(book, index=False)
    pool = (
        "import sys\n"
        "from premiumlab.cli.app import app\n"
        "try:\n"
        f"    app(['rate', {str(tmp_path / 'no-table')!r}, {str(book)!r}, '--out', {str(tmp_path / 'p.csv')!r}])\n"
        "except SystemExit:\n"
        "    pass\n"
        "import pyarrow\n"
        "print(pyarrow.default_memory_pool().backend_name)\n"
    )
    done = subprocess.run([sys.executable, "-c", pool], capture_output=True, text=True, env=env)
    assert done.stdout.strip().splitlines()[-1] == "jemalloc", done.stderr


def rate_by_hand(table_dir: Path, book: pd.DataFrame) -> np.ndarray:
    """Pure premium of every row read straight from the table's files: base rate x the relativity
    of the band [lower, upper) or level of each factor x exposure."""
    meta = json.loads((table_dir / "table.json").read_text())
    premium = np.full(len(book), meta["base_rate"]) * book["exposure"].to_numpy(float)
    for factor in meta["factors"]:
        rows = pd.read_csv(table_dir / factor["file"], dtype={"level": str})
        if factor["type"] == "numeric":
            band = np.searchsorted(rows["lower"].to_numpy(float), book[factor["name"]].to_numpy(float), "right") - 1
            premium *= rows["relativity"].to_numpy(float)[band]
        else:
            premium *= book[factor["name"]].astype(str).map(dict(zip(rows["level"], rows["relativity"]))).to_numpy()
    return premium


def as_json(result) -> dict:
    """`to_dict()` through JSON and back, as a caller storing it would see it."""
    return json.loads(json.dumps(result.to_dict(), allow_nan=False))


def test_a_chain_of_calls_on_a_small_simulated_book(tmp_path):
    spec = tmp_path / "spec.toml"
    spec.write_text((ROOT / "scenarios" / "motor_main_effects_spec.toml").read_text() + QUICK_GBM)
    book_path = tmp_path / "book.parquet"

    sim = premiumlab.simulate(ROOT / "scenarios" / "motor_main_effects.toml", out=book_path, policies=1500, seed=5)
    book = pd.read_parquet(book_path)
    assert (sim.book, sim.truth) == (book_path, tmp_path / "truth.json") and sim.truth.is_file()
    assert (sim.rows, sim.claims) == (len(book), int(book["claim_count"].sum()))
    assert sim.exposure == pytest.approx(book["exposure"].sum(), rel=1e-12)
    assert as_json(sim)["book"] == str(book_path)
    with pytest.raises(dataclasses.FrozenInstanceError):
        sim.rows = 0  # type: ignore[misc]

    report = premiumlab.validate(book_path, spec=spec)
    assert report.errors == [] and report.rows == len(book)
    overall = report.profile["(overall)"]
    assert overall["exposure"].iloc[0] == pytest.approx(book["exposure"].sum(), rel=1e-9)
    assert overall["claims"].iloc[0] == book["claim_count"].sum()
    assert as_json(report)["profile"]["(overall)"][0]["exposure"] == pytest.approx(book["exposure"].sum(), rel=1e-9)

    run = premiumlab.fit(book_path, spec=spec, out=tmp_path / "run", models="glm,gbm")
    assert isinstance(run, premiumlab.Run) and run.path == tmp_path / "run"
    assert run.manifest["rows"]["total"] == len(book) and run.manifest["models"] == ["glm", "gbm"]
    assert as_json(run)["manifest"]["book"]["sha256"] == run.manifest["book"]["sha256"]

    comparison = premiumlab.compare(run.path)
    assert comparison.holdout_rows == run.manifest["rows"]["holdout"]
    assert as_json(comparison) == json.loads((run.path / "comparison.json").read_text())

    table_dir = tmp_path / "glm_table"
    table = premiumlab.tabulate(run.path, out=table_dir, model="glm")
    assert table.table == table_dir
    assert table.rate_level["base_rate"] == json.loads((table_dir / "table.json").read_text())["base_rate"]
    fidelity = json.loads((table_dir / "fidelity.json").read_text())
    assert {k: v for k, v in as_json(table).items() if k not in ("table", "seconds")} == {
        k: v for k, v in fidelity.items() if k not in ("format", "version")
    }

    audit = premiumlab.audit(table_dir, run=run.path)
    assert audit.table == table_dir and audit.cautions == (DRAFT_CAUTION,)
    assert not any(v.startswith("certificate:") for v in audit.violations)
    assert as_json(audit)["violations"] == list(audit.violations)

    priced_path = tmp_path / "priced.parquet"
    rated = premiumlab.rate(table_dir, book_path, out=priced_path)
    assert rated.priced == priced_path and rated.cautions
    priced = pd.read_parquet(priced_path)
    by_hand = rate_by_hand(table_dir, book)
    assert priced["pure_premium"].sum() == pytest.approx(by_hand.sum(), rel=1e-9, abs=0.005 * len(priced))
    np.testing.assert_allclose(priced["pure_premium"].to_numpy(), by_hand, rtol=1e-9, atol=0.005 + 1e-9)  # cents

    impact_path = tmp_path / "impact.json"
    impact = premiumlab.impact(
        book_path,
        current="column:current_premium",
        proposed=table_dir,
        cap=0.15,
        thresholds=(0.05, 0.1),
        out=impact_path,
    )
    assert impact.rows == len(book) and impact.policies == book["policy_id"].nunique() < len(book)
    assert impact.total_current == pytest.approx(book["current_premium"].sum(), rel=1e-9)
    assert impact.total_proposed == pytest.approx(priced["gross_premium"].sum(), rel=1e-9)
    assert impact.overall_change == pytest.approx(impact.total_proposed / impact.total_current - 1, rel=1e-9)
    assert [t["threshold"] for t in impact.above_thresholds] == [0.05, 0.1]
    assert as_json(impact) == json.loads(impact_path.read_text())

    certificate = premiumlab.certify(
        run.path / "models" / "gbm_pure_premium.txt", factor="bonus_class", direction="increasing"
    )
    assert certificate.monotone and certificate.violation_count == 0 and certificate.trees_checked > 0
    assert as_json(certificate)["feature"] == "bonus_class"

    tail = premiumlab.tails(book_path, spec=spec)
    losses = book.loc[book["claim_amount"] > 0, "claim_amount"].to_numpy(float)
    assert tail.losses == losses.size and tail.default_threshold
    assert tail.threshold == pytest.approx(np.quantile(losses, 0.9), rel=1e-12)
    assert tail.exceedances == int((losses > tail.threshold).sum())
    assert as_json(tail)["mean_excess"][0]["exceedances"] == tail.mean_excess[0]["exceedances"]

    written = premiumlab.report(run.path)
    assert written.report == run.path / "report.html" and written.report.is_file()
    assert as_json(written) == {"report": str(run.path / "report.html")}
