"""Missing factor values as data and levels unseen in the training rows (issue 14, items 1 and 3).

Reading (CSV and Parquet), the spec's `missing = "refuse"`, the missing level or band of `Levels`,
`validate`'s share missing and frequency ratio (checked against statsmodels' Poisson GLM with an
indicator and against the defining tail probabilities of the exact binomial interval, scipy), and
fit -> tabulate -> rate on a small invented book with missing values and a level seen only in the
holdout. The books are small invented ones (`small_book`): the figures checked are the program's
arithmetic, not estimates of a truth.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

import premiumlab
import rating_tables
from premiumlab._core.errors import InputError
from premiumlab.book.levels import categorise, factor_levels
from premiumlab.book.scan import load_book, scan_book
from premiumlab.book.spec import load_spec, parse_spec
from premiumlab.book.split import holdout_flags
from premiumlab.book.validate import frequency_ratio, validate_book
from premiumlab.models.glm.fit import GlmResult
from premiumlab.tabulation.banding import Banding
from premiumlab.tabulation.refit import pooled_refit
from rating_tables import MISSING_LABEL

from _builders import SPEC_TEXT, run_cli, small_book, write_book

#: The small runs here: two folds, one setting, few rounds, one thread.
TINY_GBM = "\n[gbm]\nfolds = 2\nmax_settings = 1\nmax_rounds = 60\nthreads = 1\n"
#: Region of the rows held out only: a level the training rows never see.
NEW_REGION = "Westfold"


def gapped_book(n: int = 3000, seed: int = 5) -> pd.DataFrame:
    """`small_book` with age missing on every 10th row, region on every 9th from row 3 and bonus on
    every 25th from row 1."""
    book = small_book(n, seed)
    book["age"] = book["age"].astype(float)
    book.loc[::10, "age"] = np.nan
    book.loc[3::9, "region"] = None
    book.loc[1::25, "bonus"] = None
    return book


def spec_with(tmp_path: Path, extra: str = "", text: str = SPEC_TEXT) -> Path:
    p = tmp_path / "spec.toml"
    p.write_text(text + extra)
    return p


# --------------------------------------------------------------------------------------------
# the spec


def test_spec_missing_defaults_to_level_and_accepts_refuse():
    spec = parse_spec(tomllib.loads(SPEC_TEXT + '\n[factors.zone]\ntype = "categorical"\nmissing = "refuse"\n'))
    assert [f.missing for f in spec.factors] == ["level", "level", "level", "refuse"]


@pytest.mark.parametrize(
    "extra, fragment",
    [
        ('[factors.zone]\ntype = "categorical"\nmissing = "drop"', "factors.zone.missing"),
        ('[factors.zone]\ntype = "categorical"\nbase = "(missing)"', "factors.zone.base' is '(missing)'"),
        ('[factors.zone]\ntype = "numeric"\nbase = "(missing)"', "factors.zone.base' is '(missing)'"),
        ('[factors.zone]\ntype = "categorical"\nlevels = ["a", "(missing)"]', "factors.zone.levels' lists '(missing)'"),
        ('[factors.zone]\ntype = "categorical"\nlevels = ["a", ""]', "factors.zone.levels[1]"),
    ],
)
def test_spec_refusals_name_the_key(extra, fragment):
    with pytest.raises(InputError) as info:
        parse_spec(tomllib.loads(SPEC_TEXT + "\n" + extra), source="spec.toml")
    assert fragment in str(info.value) and "\n" not in str(info.value)


# --------------------------------------------------------------------------------------------
# reading and levels


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_missing_values_are_read_as_data(tmp_path, suffix):
    """Empty cells (CSV) and nulls (Parquet) read as NaN (numeric) and "" (categorical); the training
    levels end with the missing label, which the rows without a value take; the base is a level."""
    frame = gapped_book(400)
    spec = load_spec(spec_with(tmp_path))
    book = load_book(write_book(frame, tmp_path / f"book{suffix}"), spec)
    assert np.isnan(book.frame["age"]).sum() == frame["age"].isna().sum() == 40
    assert (book.frame["region"] == "").sum() == frame["region"].isna().sum() == 45
    assert (book.frame["bonus"] == "").sum() == 16
    levels = factor_levels(book, spec, ~book.holdout)
    assert levels["age"].labels == ("[-inf, 25)", "[25, 40)", "[40, 60)", "[60, inf)", MISSING_LABEL)
    assert levels["region"].labels == ("Eastvale", "Northmoor", "Southby", MISSING_LABEL)
    assert levels["bonus"].labels == ("01", "02", "03", MISSING_LABEL)
    assert all(lv.missing and lv.base != MISSING_LABEL for lv in levels.values())
    cats = categorise(book.frame, levels)
    for name in ("age", "region", "bonus"):
        assert ((cats[name] == MISSING_LABEL).to_numpy() == frame[name].isna().to_numpy()).all()


def test_missing_is_never_the_base_even_with_the_most_exposure(tmp_path):
    frame = small_book(400)
    frame.loc[frame.index[:300], "region"] = None
    spec = load_spec(spec_with(tmp_path))
    book = load_book(write_book(frame, tmp_path / "book.csv"), spec)
    levels = factor_levels(book, spec, np.ones(book.n_rows, dtype=bool))
    assert levels["region"].labels[-1] == MISSING_LABEL and levels["region"].base != MISSING_LABEL


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_refuse_makes_a_missing_value_an_error_naming_column_and_rows(tmp_path, suffix):
    spec = spec_with(
        tmp_path,
        text=SPEC_TEXT.replace(
            '[factors.region]\ntype = "categorical"', '[factors.region]\ntype = "categorical"\nmissing = "refuse"'
        ).replace("bands = [25, 40, 60]", 'bands = [25, 40, 60]\nmissing = "refuse"'),
    )
    path = write_book(gapped_book(400), tmp_path / f"book{suffix}")
    _, _, findings = scan_book(path, load_spec(spec))
    errors = [str(f) for f in findings if f.level == "error"]
    assert any(
        "column 'age': 40 rows with a missing value (the spec refuses them" in e
        and "(rows 0, 10, 20, 30, 40, ...)" in e
        for e in errors
    ), errors
    assert any(
        "column 'region': 45 rows with a missing value" in e and "(rows 3, 12, 21, 30, 39, ...)" in e for e in errors
    )
    assert not any("'bonus'" in e for e in errors)  # bonus keeps the default: missing values are data
    with pytest.raises(InputError, match="column 'age': 40 rows with a missing value"):
        load_book(path, load_spec(spec))


def test_quantile_bands_are_cut_on_the_values_present(tmp_path):
    """Without `bands`, validate's whole-book quantile edges ignore the missing values (the same edges
    as on the book without those rows), and the profile shows them as a band of their own."""
    frame = gapped_book(2000)
    text = SPEC_TEXT.replace("bands = [25, 40, 60]", "n_bands = 4")
    spec = spec_with(tmp_path, text=text)
    gapped = validate_book(write_book(frame, tmp_path / "book.csv"), spec)
    present = frame[frame["age"].notna()]
    whole = validate_book(write_book(present, tmp_path / "present.csv"), spec)
    age = gapped.profile["age"]
    assert list(age.index[:-1]) == list(whole.profile["age"].index)
    assert age.index[-1] == MISSING_LABEL
    assert age.loc[MISSING_LABEL, "exposure"] == pytest.approx(
        frame.loc[frame["age"].isna(), "exposure"].sum(), rel=1e-12
    )


# --------------------------------------------------------------------------------------------
# validate: share missing and frequency ratio


def _riskier_when_missing(n: int = 6000) -> pd.DataFrame:
    """A book whose rows with region missing (every 5th) claim at twice the others' rate (invented)."""
    frame = small_book(n, seed=11)
    rng = np.random.default_rng(12)
    lost = np.arange(n) % 5 == 0
    frame["claim_count"] = rng.poisson(np.where(lost, 0.8, 0.4) * frame["exposure"])
    frame["claim_amount"] = np.where(frame["claim_count"] > 0, 500.0 * frame["claim_count"], 0.0)
    frame.loc[lost, "region"] = None
    return frame


def test_validate_frequency_ratio_matches_a_poisson_glm_with_an_indicator(tmp_path):
    """The ratio equals exp(coefficient) of a Poisson GLM (statsmodels) of the claim count on an
    indicator of the missing value with offset log(exposure), whose MLE is the ratio of the two
    groups' claims per exposure; the exact interval is close to the GLM's Wald interval at these
    counts (both ends within 3 %: ~250 and ~900 claims; the exact one is slightly wider), each end of
    it has tail probability 2.5 % under the binomial of the missing rows' share of the claims
    (scipy.stats.binom, the defining property of the Clopper-Pearson interval); the warning names the
    factor."""
    frame = _riskier_when_missing()
    report = validate_book(write_book(frame, tmp_path / "book.parquet"), spec_with(tmp_path))
    row = report.missing.loc["region"]
    lost = frame["region"].isna().to_numpy()
    assert row.rows_missing == lost.sum() == 1200 and row.share_of_rows == pytest.approx(0.2, rel=1e-12)
    assert row.share_of_exposure == pytest.approx(
        frame.loc[lost, "exposure"].sum() / frame["exposure"].sum(), rel=1e-12
    )
    assert report.missing.loc["age", "rows_missing"] == 0 and math.isnan(report.missing.loc["age", "frequency_ratio"])

    glm = sm.GLM(
        frame["claim_count"].to_numpy(float),
        sm.add_constant(lost.astype(float)),
        family=sm.families.Poisson(),
        offset=np.log(frame["exposure"].to_numpy(float)),
    ).fit()
    assert row.frequency_ratio == pytest.approx(math.exp(glm.params[1]), rel=1e-8)
    wald_low, wald_high = np.exp(glm.conf_int(alpha=0.05)[1])
    assert row.ratio_lower == pytest.approx(wald_low, rel=0.03) and row.ratio_upper == pytest.approx(
        wald_high, rel=0.03
    )
    assert row.ratio_lower < wald_low and row.ratio_upper > wald_high

    n1 = int(frame.loc[lost, "claim_count"].sum())
    n = int(frame["claim_count"].sum())
    e1, e0 = frame.loc[lost, "exposure"].sum(), frame.loc[~lost, "exposure"].sum()

    def share(ratio: float) -> float:
        return ratio * e1 / (ratio * e1 + e0)

    assert stats.binom.sf(n1 - 1, n, share(row.ratio_lower)) == pytest.approx(0.025, rel=1e-6)
    assert stats.binom.cdf(n1, n, share(row.ratio_upper)) == pytest.approx(0.025, rel=1e-6)

    assert row.differs and 1.7 < row.frequency_ratio < 2.3
    warnings = [str(f) for f in report.findings if f.level == "warning" and f.column == "region"]
    assert any("rows with a missing value" in w and "times as often as the others" in w for w in warnings), warnings
    data = report.to_dict()
    assert [m["factor"] for m in data["missing"]] == ["age", "region", "bonus"]
    assert data["missing"][1]["differs"] is True


def test_frequency_ratio_at_the_edges():
    """No claims in the missing group: ratio and lower end 0; every claim there: upper end inf; no
    claims at all or no exposure in a group: undefined (NaN)."""
    ratio, low, high = frequency_ratio(0, 10.0, 20, 100.0)
    assert ratio == 0.0 and low == 0.0 and 0.0 < high < math.inf
    ratio, low, high = frequency_ratio(5, 10.0, 0, 100.0)
    assert ratio == math.inf and low > 0.0 and high == math.inf
    assert all(math.isnan(v) for v in frequency_ratio(0, 10.0, 0, 100.0))
    assert all(math.isnan(v) for v in frequency_ratio(3, 0.0, 4, 100.0))


def test_validate_text_shows_the_missing_values(tmp_path):
    frame = _riskier_when_missing(1500)
    path = write_book(frame, tmp_path / "book.csv")
    result = run_cli("validate", str(path), "--spec", str(spec_with(tmp_path)))
    assert result.returncode == 0, result.stderr
    assert "(missing)" in result.stdout
    line = next(line for line in result.stdout.splitlines() if line.strip().startswith("region "))
    assert "300" in line and "20.00%" in line and "differs" in line


# --------------------------------------------------------------------------------------------
# fit, tabulate and rate a book with missing values and a level seen only in the holdout


@pytest.fixture(scope="module")
def gapped_run(tmp_path_factory):
    base = tmp_path_factory.mktemp("gapped")
    frame = gapped_book()
    held = holdout_flags(frame["policy_id"].to_numpy(object), seed=7, holdout=0.2)
    frame.loc[np.flatnonzero(held)[:4], "region"] = NEW_REGION
    book = write_book(frame, base / "book.csv")
    spec = spec_with(base, TINY_GBM)
    fitted = run_cli("fit", str(book), "--spec", str(spec), "--out", str(base / "run"))
    assert fitted.returncode == 0, fitted.stderr
    return base, frame, held, fitted.stderr


@pytest.fixture(scope="module")
def gapped_tables(gapped_run):
    base = gapped_run[0]
    return {m: premiumlab.tabulate(base / "run", out=base / f"table_{m}", model=m) for m in ("gbm", "glm")}


def test_fit_records_missing_values_and_unseen_levels(gapped_run):
    base, frame, held, stderr = gapped_run
    run = premiumlab.open_run(base / "run")
    found = {(d["kind"], d["factor"]): d for d in run.manifest["diagnostics"]}
    assert set(found) == {
        ("missing_values", "age"),
        ("missing_values", "region"),
        ("missing_values", "bonus"),
        ("unseen_levels", "region"),
    }
    for name in ("age", "region", "bonus"):
        d = found[("missing_values", name)]
        lost = frame[name].isna().to_numpy()
        share = frame.loc[lost & ~held, "exposure"].sum() / frame.loc[~held, "exposure"].sum()
        assert d["model"] == "book" and d["level"] == MISSING_LABEL
        assert d["message"].startswith(
            f"{(lost & ~held).sum()} training rows ({share:.2%} of training exposure) and {(lost & held).sum()} held-out rows"
        )
    unseen = found[("unseen_levels", "region")]
    assert unseen["level"] == NEW_REGION
    assert unseen["message"].startswith(f"1 level met only outside the training rows, on 4 rows: '{NEW_REGION}'")
    assert run.levels["region"].labels == ("Eastvale", "Northmoor", "Southby", MISSING_LABEL)
    assert re.search(rf"warning: unseen_levels: book, factor 'region', level '{NEW_REGION}': 1 level", stderr)
    assert stderr.count("warning: missing_values: book") == 3
    assert isinstance(run.manifest["warnings"], list)  # the data warnings keep their own key


def test_unseen_level_is_priced_at_the_base_in_the_glm_and_predicted_by_the_boosted_model(gapped_run):
    base, frame, _, _ = gapped_run
    run = premiumlab.open_run(base / "run")
    preds = run.predictions()
    new = (frame["region"] == NEW_REGION).to_numpy()
    assert preds.filter(like="_pure_premium").notna().all().all()
    glm = GlmResult.from_json_dict(run.model_json("glm", "pure_premium"))
    book = run.load_book()
    at_base = book.frame.assign(region=np.where(new, run.levels["region"].base, book.frame["region"]))
    expected = glm.predict(categorise(at_base, run.levels))
    np.testing.assert_allclose(preds["glm_pure_premium"].to_numpy()[new], expected[new], rtol=1e-12)
    assert glm.relativities["region"][MISSING_LABEL] > 0 and glm.relativities["age"][MISSING_LABEL] > 0
    meta = run.model_json("gbm", "pure_premium")
    assert meta["categories"]["region"][-1] == MISSING_LABEL


@pytest.mark.parametrize("model", ["gbm", "glm"])
def test_tables_carry_missing_rows_and_a_fallback(gapped_run, gapped_tables, model):
    base, frame, held, _ = gapped_run
    table = rating_tables.load(base / f"table_{model}")
    factors = {f.name: f for f in table.factors}
    train = ~held
    for name in ("age", "region", "bonus"):
        row = factors[name].missing
        assert row is not None and row.relativity > 0
        assert row.exposure == pytest.approx(
            frame.loc[frame[name].isna().to_numpy() & train, "exposure"].sum(), rel=1e-9
        )
        assert MISSING_LABEL not in factors[name].labels()
    assert factors["region"].fallback == factors["region"].base
    assert factors["bonus"].fallback == factors["bonus"].base
    if model == "glm":
        fitted = premiumlab.open_run(base / "run").model_json("glm", "pure_premium")["relativities"]
        for name in ("age", "region", "bonus"):
            assert factors[name].missing.indicated == pytest.approx(fitted[name][MISSING_LABEL], rel=1e-12)


def test_rating_the_book_with_missing_values_and_a_new_level(gapped_run, gapped_tables):
    """Every row rates: a missing value takes its factor's missing row, the new level the fallback."""
    base, frame, _, _ = gapped_run
    table = rating_tables.load(base / "table_gbm")
    rated = rating_tables.rate(table, frame, "exposure")
    assert len(rated) == len(frame) and rated["gross_premium"].gt(0).all()
    factors = {f.name: f for f in table.factors}
    for name in ("age", "region"):
        lost = frame[name].isna().to_numpy()
        np.testing.assert_allclose(rated[f"rel_{name}"].to_numpy()[lost], factors[name].missing.relativity)
    region = factors["region"]
    new = (frame["region"] == NEW_REGION).to_numpy()
    fallback = region.relativity[list(region.labels()).index(region.fallback)]
    np.testing.assert_allclose(rated["rel_region"].to_numpy()[new], fallback)


def test_tabulate_distils_the_missing_band_apart(gapped_run, gapped_tables):
    """The distilled table: the promised bonus keeps its order over its levels while its missing row
    stands outside it; the bands counted in fidelity.json include each missing band; the holdout
    (with its new level) is rated for the fidelity figures."""
    base, result = gapped_run[0], gapped_tables["gbm"]
    table = rating_tables.load(base / "table_gbm")
    factors = {f.name: f for f in table.factors}
    assert (np.diff(factors["bonus"].relativity) >= 0).all()
    assert result.distillation["bands"]["age"] == len(factors["age"].relativity) + 1
    assert all(MISSING_LABEL not in m["bands"] for m in result.distillation["merges"])
    assert result.fidelity["subset"] == "holdout" and result.fidelity["rows"] == gapped_run[2].sum()


def test_missing_band_is_its_own_cell_outside_the_promise_and_the_two_way_table():
    """Pooled refit on an exactly multiplicative response (invented): x promised increasing over its
    bands (1, 1.2, 1.5) with its missing band at 0.7, below every band; z (1, 1.3); a two-way table
    (x, z). No merge is made (the missing band is no reversal), the relativities come back to 1e-6
    and the two-way table is 1 in the missing row."""
    rng = np.random.default_rng(1)
    n = 3000
    x = rng.uniform(0.0, 3.0, n)
    x[::7] = np.nan
    z = rng.integers(0, 2, n).astype(float)
    exposure = rng.uniform(0.2, 1.0, n)
    band = np.where(np.isnan(x), 3, np.searchsorted([1.0, 2.0], np.nan_to_num(x), side="right"))
    true_x = np.array([1.0, 1.2, 1.5, 0.7])
    response = 100.0 * true_x[band] * np.where(z > 0.5, 1.3, 1.0)
    bandings = {
        "x": Banding("x", "increasing", edges=np.array([1.0, 2.0]), missing=True),
        "z": Banding("z", "none", edges=np.array([0.5])),
    }
    pooled = pooled_refit(bandings, {"x": x, "z": z}, [("x", "z")], exposure, response, 3)
    assert pooled.merges == []
    base = pooled.fit.bases["x"]
    assert base != 3
    np.testing.assert_allclose(pooled.fit.relativities["x"], true_x / true_x[base], rtol=1e-6)
    assert pooled.fit.two_way[("x", "z")].shape == (4, 2)
    np.testing.assert_array_equal(pooled.fit.two_way[("x", "z")][3], [1.0, 1.0])
    assert pooled.bandings["x"].labels()[-1] == MISSING_LABEL


def test_compare_leaves_the_new_level_out_of_its_actual_against_expected(gapped_run):
    """`compare` runs on a holdout with a new level: the region's actual-to-expected table shows the
    run's levels with the missing one, and its exposure is the holdout's less the new level's rows."""
    base, frame, held, _ = gapped_run
    result = premiumlab.compare(base / "run")
    ave = json.loads((base / "run" / "comparison.json").read_text())["actual_vs_expected"]["region"]["glm_pure_premium"]
    assert ave["level"] == ["Eastvale", "Northmoor", "Southby", MISSING_LABEL]
    new = (frame["region"] == NEW_REGION).to_numpy()
    assert sum(ave["exposure"]) == pytest.approx(frame.loc[held & ~new, "exposure"].sum(), rel=1e-9)
    assert result.holdout_rows == held.sum()
