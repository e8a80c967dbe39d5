"""`select`: an actuary's selections on an indicated table, their off-balances, the rebalanced base
rate, the audit and the fidelity; and the arithmetic of each rule checked by hand.

The pipeline tests use the session's small motor run (`demo_run`: the table made with `auto` and the
GLM table of the same run, which stands in for the table in force). Expectations come from the
rules stated in docs/commands.md (`premiumlab select`) and are recomputed here with numpy and the
reference rater `rating_tables`, independently of premiumlab's code path.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import rating_tables
from premiumlab.tabulation.selection import (
    banded_relativity,
    capped,
    credibility_weighted,
    rounded_edges,
    rounded_within,
    smoothed,
)

from _builders import run_cli

CAP_ALL = """
[every_factor]
cap = 0.10
reason = "Hold every band's change within 10 % of the table in force."
"""

SEVERAL = """
[every_factor]
cap = 0.10
reason = "Hold every band's change within 10 % of the table in force."

[factor.driver_age]
edges = "spec"
reason = "Print the rating manual's age bands."

[factor.vehicle_power]
edges = "found"
round_edges_to = 10
reason = "Power bands at round numbers of kW."

[[factor.region.override]]
level = "Marlow Reach"
relativity = 1.05
reason = "Local repair costs rising faster than the experience shows."
"""


def _select(demo_run, tmp_path, text: str, name: str = "selected", *extra: str):
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    out = tmp_path / name
    r = run_cli(
        "select",
        str(demo_run["table"]),
        "--selections",
        str(path),
        "--run",
        str(demo_run["run"]),
        "--current",
        str(demo_run["glm_table"]),
        "--out",
        str(out),
        *extra,
    )
    return r, out


def _training(demo_run):
    from premiumlab.runs.rundir import open_run
    from premiumlab.tabulation.from_run import rating_frame, reread_book

    run = open_run(demo_run["run"])
    book = reread_book(run)
    train = np.flatnonzero(~book.holdout)
    return run, book, train, rating_frame(book, run.spec, train)


@pytest.fixture(scope="module")
def capped_table(demo_run, tmp_path_factory):
    r, out = _select(demo_run, tmp_path_factory.mktemp("select"), CAP_ALL)
    assert r.returncode == 0, r.stderr
    return {"out": out, "stdout": r.stdout, "fidelity": json.loads((out / "fidelity.json").read_text())}


def test_a_ten_percent_cap_holds_on_every_band_and_is_rebalanced(demo_run, capped_table):
    """Every band's relativity over its current effect (the file's `current` column) lies in
    [0.9, 1.1] (1e-12); the selected table's total pure premium on the training rows meets the
    indicated table's target again (1e-9); the per-rule off-balances and the rounding compound to
    the stated total; the base rate moved by exactly the inverse of that total."""
    selected = rating_tables.load(capped_table["out"])
    indicated = rating_tables.load(demo_run["table"])
    for f in selected.main_factors:
        change = f.relativity / f.current
        assert change.min() >= 0.9 - 1e-12 and change.max() <= 1.1 + 1e-12, f.name
    run, _, _, frame = _training(demo_run)
    total = rating_tables.pure_premium(selected, frame, run.spec.columns.exposure).sum()
    assert total == pytest.approx(indicated.target["total_pure_premium"], rel=1e-9)
    level = capped_table["fidelity"]["rate_level"]
    compounded = np.prod([1 + r["off_balance"] for r in selected.selections]) * (1 + level["rounding_off_balance"])
    assert compounded - 1 == pytest.approx(level["off_balance"], abs=1e-9)
    assert selected.base_rate == pytest.approx(indicated.base_rate / (1 + level["off_balance"]), rel=1e-9)
    assert "off-balance of the selections at the indicated base rate" in capped_table["stdout"]


def test_the_selected_table_says_what_it_is_and_keeps_its_reasons(demo_run, capped_table):
    """Ids: `.indicated` from tabulate, `.selected` from select, the GLM table's names its source:
    three tables of one run, three ids. Every selection carries the file's reason."""
    selected = rating_tables.load(capped_table["out"])
    indicated = rating_tables.load(demo_run["table"])
    glm = rating_tables.load(demo_run["glm_table"])
    assert len({selected.table_id, indicated.table_id, glm.table_id}) == 3
    assert indicated.table_id.endswith(".indicated") and glm.table_id.endswith(".glm.indicated")
    assert selected.table_id == indicated.table_id.removesuffix(".indicated") + ".selected"
    assert (selected.stage, indicated.stage) == ("selected", "indicated")
    assert selected.provenance["indicated_table_id"] == indicated.table_id
    assert {r["rule"] for r in selected.selections} == {"cap"}
    assert {r["reason"] for r in selected.selections} == {"Hold every band's change within 10 % of the table in force."}
    assert selected.book_columns == indicated.book_columns


def test_the_audit_of_the_selected_table_is_clean_and_its_fidelity_is_reported(demo_run, capped_table):
    """The spec's promises hold on the selected table (checked again with the reference audit), and
    the holdout deviance of both tables is reported, recomputed here with scikit-learn's
    mean_tweedie_deviance (1e-9)."""
    from sklearn.metrics import mean_tweedie_deviance

    from premiumlab.runs.rundir import open_run
    from premiumlab.tabulation.from_run import rating_frame, reread_book

    fid = capped_table["fidelity"]
    assert fid["audit"]["violations"] == []
    selected = rating_tables.load(capped_table["out"])
    run = open_run(demo_run["run"])
    promises = {f.name: f.monotone for f in run.spec.factors if f.monotone != "none"}
    assert promises and rating_tables.audit(selected, promises=promises) == []
    book = reread_book(run)
    held = np.flatnonzero(book.holdout)
    mu = rating_tables.pure_premium(selected, rating_frame(book, run.spec, held), "exposure") / book.exposure[held]
    y = book.claim_amount[held] / book.exposure[held]
    power = fid["fidelity"]["indicated_table_fidelity"]["tweedie_power"]
    expected = mean_tweedie_deviance(y, mu, sample_weight=book.exposure[held], power=power)
    assert fid["fidelity"]["selected"]["mean_deviance"] == pytest.approx(expected, rel=1e-9)
    assert "mean_deviance" in fid["fidelity"]["indicated"]


def test_edges_override_and_cap_together(demo_run, tmp_path):
    """driver_age takes the spec's edges exactly; vehicle_power's found edges rounded to 10; the
    override is kept at 1.05 (not capped) with its reason; every other band keeps the cap."""
    r, out = _select(demo_run, tmp_path, SEVERAL)
    assert r.returncode == 0, r.stderr
    selected = rating_tables.load(out)
    indicated = rating_tables.load(demo_run["table"])
    run, *_ = _training(demo_run)
    spec_edges = {f.name: f.bands for f in run.spec.factors}
    assert tuple(selected.factor("driver_age").lower[1:]) == spec_edges["driver_age"]
    power_edges = selected.factor("vehicle_power").lower[1:]
    assert np.array_equal(power_edges, rounded_edges(indicated.factor("vehicle_power").lower[1:], 10.0))
    region = selected.factor("region")
    marlow = region.levels.index("Marlow Reach")
    assert region.relativity[marlow] == 1.05
    records = {(s["factor"], s["rule"]): s for s in selected.selections}
    assert records[("region", "override Marlow Reach")]["applies_to"] == ["Marlow Reach"]
    assert "repair costs" in records[("region", "override Marlow Reach")]["reason"]
    for f in selected.main_factors:
        change = np.delete(f.relativity / f.current, [marlow] if f.name == "region" else [])
        assert change.min() >= 0.9 - 1e-12 and change.max() <= 1.1 + 1e-12, f.name


@pytest.mark.parametrize(
    "text, message",
    [
        ("[every_factor]\ncap = 0.1\n", "key 'every_factor.reason' is required"),
        ("[every_factor]\ncap = 1.5\nreason = 'x'\n", "key 'every_factor.cap' must be"),
        ("[factor.driver_age]\nsmooth = 4\nreason = 'x'\n", "must be an odd number of bands"),
        ("[factor.nosuch]\ncap = 0.1\nreason = 'x'\n", "the table has no factor 'nosuch'"),
        ("[factor.region]\nedges = [1, 2]\nreason = 'x'\n", "'region' is categorical; edges apply to numeric"),
        ("[[factor.region.override]]\nlevel = 'Ambervale'\nrelativity = 1.2\nreason = 'x'\n", "is the base of"),
        ("[[factor.region.override]]\nlevel = 'Nowhere'\nrelativity = 1.2\nreason = 'x'\n", "no band or level"),
        ("[[factor.region.override]]\nlevel = 'Marlow Reach'\nrelativity = 1.2\n", "override[0].reason' is required"),
        ("[factor.driver_age]\nround_edges_to = 5\nreason = 'x'\n", 'needs edges = "found"'),
        ("[factor.driver_age]\ncapp = 0.1\nreason = 'x'\n", "did you mean 'factor.driver_age.cap'"),
    ],
)
def test_a_bad_selections_file_gets_one_line_naming_the_key(demo_run, tmp_path, text, message):
    """Exit 2, one stderr line naming the file and key, nothing written (docs/commands.md)."""
    r, out = _select(demo_run, tmp_path, text)
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0] and "selected.toml" in lines[0], r.stderr
    assert "Traceback" not in r.stderr and not out.exists()


def test_a_cap_needs_the_current_table(demo_run, tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(CAP_ALL)
    r = run_cli(
        "select",
        str(demo_run["table"]),
        "--selections",
        str(path),
        "--run",
        str(demo_run["run"]),
        "--out",
        str(tmp_path / "o"),
    )
    assert r.returncode == 2 and "give it with --current" in r.stderr and not (tmp_path / "o").exists()


# --------------------------------------------------------------------------------- the arithmetic


def test_rounded_edges_merge_edges_that_round_together():
    """21.4 -> 20, 23.9 -> 25 and 26 -> 25 (one edge), 67 -> 65, with step 5 (by hand)."""
    assert rounded_edges(np.array([21.4, 23.9, 26.0, 67.0]), 5.0).tolist() == [20.0, 25.0, 65.0]


def test_banded_relativity_is_the_exposure_weighted_geometric_mean():
    """Band 0 holds rows with relativities 2 and 8 at exposures 1 and 1: sqrt(16) = 4; band 1 one row
    at 1.5; band 2 no row -> NaN and exposure 0 (numpy's average as the reference)."""
    band = np.array([0, 0, 1])
    rel, expo = banded_relativity(band, np.log([2.0, 8.0, 1.5]), np.array([1.0, 1.0, 0.5]), 3)
    assert rel[0] == pytest.approx(np.exp(np.average(np.log([2.0, 8.0]), weights=[1, 1])), rel=1e-14)
    assert rel[1] == pytest.approx(1.5, rel=1e-14) and np.isnan(rel[2])
    assert expo.tolist() == [2.0, 0.5, 0.0]


def test_credibility_smoothing_cap_and_rounding_by_hand():
    """r = 1.44^0.5 x 1^0.5 = 1.2; three bands 1, 4, 16 at equal exposure smoothed over 3: the middle
    is (1 x 4 x 16)^(1/3) = 4, the ends (1 x 4)^(1/2) = 2 and (4 x 16)^(1/2) = 8; a cap of 10 % on 1.3
    against 1.0 gives 1.1; rounding 1.10049 within [0, 1.1] to 3 decimals gives 1.1, and 1.10051
    (which rounds to 1.101) is held at 1.1."""
    assert credibility_weighted(np.array([1.44]), np.array([1.0]), np.array([0.5]))[0] == pytest.approx(1.2, rel=1e-14)
    assert smoothed(np.array([1.0, 4.0, 16.0]), np.ones(3), 3) == pytest.approx([2.0, 4.0, 8.0], rel=1e-14)
    assert capped(np.array([1.3, 0.5, 1.05]), np.ones(3), 0.10).tolist() == pytest.approx([1.1, 0.9, 1.05])
    held = rounded_within(np.array([1.10049, 1.10051, 0.5]), np.array([0.0, 0.0, 0.9]), np.array([1.1, 1.1, 1.1]), 3)
    assert held.tolist() == [1.1, 1.1, 0.9]


def test_a_selection_that_breaks_a_promise_is_named_by_select_and_by_audit(demo_run, tmp_path):
    """The spec promises bonus_class increasing; an override of B3 to 0.5 breaks it: select lists the
    violation with the selections on bonus_class, and `audit --spec` names them too (exit 1)."""
    text = "[[factor.bonus_class.override]]\nlevel = 'B3'\nrelativity = 0.5\nreason = 'A test of the audit.'\n"
    r, out = _select(demo_run, tmp_path, text)
    assert r.returncode == 0, r.stderr
    fid = json.loads((out / "fidelity.json").read_text())
    (broken,) = [v for v in fid["audit"]["violations"] if v["factor"] == "bonus_class"]
    assert broken["selections"] == ["override B3"]
    audit = run_cli("audit", str(out), "--spec", str(demo_run["spec"]))
    assert audit.returncode == 1
    assert "(selections on 'bonus_class': override B3)" in audit.stdout


def test_the_report_shows_the_selections_and_the_impact(demo_run, capped_table, tmp_path):
    """`report --table SELECTED --current GLM --book BOOK`: the selections section lists every rule
    with its reason and the base-rate correction; the impact section's overall change is the one
    `premiumlab impact` computes for the same tables and book."""
    out = tmp_path / "review.html"
    r = run_cli(
        "report",
        str(demo_run["run"]),
        "--table",
        str(capped_table["out"]),
        "--current",
        str(demo_run["glm_table"]),
        "--book",
        str(demo_run["book"]),
        "--out",
        str(out),
    )
    assert r.returncode == 0, r.stderr
    page = out.read_text()
    assert "Selections made on the indicated table" in page
    assert "Hold every band&#39;s change within 10 % of the table in force." in page
    impact = run_cli(
        "impact",
        str(demo_run["book"]),
        "--current",
        str(demo_run["glm_table"]),
        "--proposed",
        str(capped_table["out"]),
        "--out",
        str(tmp_path / "impact.json"),
    )
    assert impact.returncode == 0, impact.stderr
    change = json.loads((tmp_path / "impact.json").read_text())["overall_change"]
    assert f"<strong>{change:+.2%}</strong>" in page
