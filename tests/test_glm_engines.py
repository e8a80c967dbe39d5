"""GLM engines: aliased and empty levels, chunked statistics, determinism, the JSON form, input errors.

Reference for the estimates: statsmodels GLM on the rows of the same book without the aliased or
empty columns (that fit is what the dropped-column fit must equal). Books are invented.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import premiumlab.models.glm.fit as glm
from premiumlab._core.errors import InputError
from premiumlab.models.glm.engines import POISSON, OneHotDesign, choose_engine, row_statistics
from premiumlab.models.glm.fit import GlmInputs, GlmResult, fit_frequency, fit_pure_premium, fit_severity

ENGINES = ("cells", "rows")


def small_book(n_rows: int = 4_000, seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    area = rng.integers(0, 4, n_rows)
    cover = rng.integers(0, 3, n_rows)
    exposure = rng.uniform(0.2, 1.0, n_rows)
    count = rng.poisson(exposure * np.exp(-1.5 + 0.2 * area - 0.3 * cover)).astype(float)
    amount = np.where(count > 0, rng.gamma(2.0 * np.maximum(count, 1), 800.0), 0.0)
    amount[(count > 0) & (rng.random(n_rows) < 0.05)] = 0.0
    return pd.DataFrame({"area": area, "cover": cover, "exposure": exposure, "count": count, "amount": amount})


def inputs_of(book: pd.DataFrame, factors: dict[str, pd.Categorical], **changes) -> GlmInputs:
    frame = pd.DataFrame(factors)
    first_levels = {
        name: frame[name].cat.categories[0] for name in frame if isinstance(frame[name].dtype, pd.CategoricalDtype)
    }
    arguments = dict(
        factors=frame,
        base_levels=first_levels,
        exposure=book["exposure"].to_numpy(),
        claim_count=book["count"].to_numpy(),
        claim_amount=book["amount"].to_numpy(),
    )
    arguments.update(changes)
    return GlmInputs(**arguments)


def labelled(codes: pd.Series, prefix: str, extra: tuple[str, ...] = ()) -> pd.Categorical:
    labels = [f"{prefix}{k}" for k in range(int(codes.max()) + 1)]
    return pd.Categorical.from_codes(codes.to_numpy(), labels + list(extra))


def statsmodels_frequency(book: pd.DataFrame) -> sm.GLM:
    columns = [np.ones(len(book))]
    for name in ("area", "cover"):
        columns += [(book[name] == k).to_numpy(float) for k in range(1, book[name].max() + 1)]
    return sm.GLM(
        book["count"].to_numpy(),
        np.column_stack(columns),
        family=sm.families.Poisson(),
        offset=np.log(book["exposure"].to_numpy()),
    ).fit()


@pytest.fixture(scope="module")
def book() -> pd.DataFrame:
    return small_book()


@pytest.mark.parametrize("engine", ENGINES)
def test_aliased_factor_is_dropped_and_named(book, engine):
    """A factor identical to another up to relabelling: its terms are aliased, named, relativity 1;
    the rest equals statsmodels without it (coefficients 1e-8, deviance, df_resid and AIC 1e-8 rel)."""
    factors = {
        "area": labelled(book["area"], "a"),
        "cover": labelled(book["cover"], "c"),
        "area_copy": pd.Categorical.from_codes(3 - book["area"].to_numpy(), ["z0", "z1", "z2", "z3"]),
    }
    result = fit_frequency(inputs_of(book, factors), engine=engine, penalty="none")
    assert result.aliased == ["area_copy[z1]", "area_copy[z2]", "area_copy[z3]"]
    assert sum("aliased" in note for note in result.notes) == 3
    assert all(value == 1.0 for value in result.relativities["area_copy"].values())
    reference = statsmodels_frequency(book)
    np.testing.assert_allclose([row["estimate"] for row in result.coefficients], reference.params, atol=1e-8)
    assert result.df_resid == reference.df_resid
    assert result.deviance == pytest.approx(reference.deviance, rel=1e-8)
    assert result.aic == pytest.approx(reference.aic, rel=1e-8)


@pytest.mark.parametrize("engine", ENGINES)
def test_level_without_exposure_is_reported(book, engine):
    """A level with no rows is named in `no_rows` (not `aliased`), the notes and the warnings;
    estimates equal statsmodels to 1e-8."""
    factors = {"area": labelled(book["area"], "a", extra=("a_unused",)), "cover": labelled(book["cover"], "c")}
    result = fit_frequency(inputs_of(book, factors), engine=engine, penalty="none")
    assert result.no_rows == ["area[a_unused]"] and result.aliased == []
    assert [(w["kind"], w["factor"], w["level"]) for w in result.warnings] == [("no_rows", "area", "a_unused")]
    assert "no rows in the frequency fit" in result.warnings[0]["message"]
    assert any(note.startswith("area[a_unused]: no rows") for note in result.notes)
    assert result.relativities["area"]["a_unused"] == 1.0
    assert list(result.relativities["area"]) == ["a0", "a1", "a2", "a3", "a_unused"]
    np.testing.assert_allclose(
        [row["estimate"] for row in result.coefficients], statsmodels_frequency(book).params, atol=1e-8
    )


def test_level_without_claims_is_dropped_from_severity_only(book):
    """A level whose rows have no claims is estimable for frequency but has no severity rows."""
    cover = book["cover"].to_numpy().copy()
    cover[book["count"].to_numpy() == 0] = np.where(book["area"] == 0, 3, cover)[book["count"].to_numpy() == 0]
    factors = {"area": labelled(book["area"], "a"), "cover": pd.Categorical.from_codes(cover, ["c0", "c1", "c2", "c3"])}
    inputs = inputs_of(book, factors)
    assert "cover[c3]" not in fit_frequency(inputs).no_rows
    severity = fit_severity(inputs)
    assert severity.no_rows == ["cover[c3]"] and severity.aliased == []
    with_claims = (book["count"] > 0) & (book["amount"] > 0)
    assert severity.n_rows == int(with_claims.sum())
    nil = int(((book["count"] > 0) & (book["amount"] == 0)).sum())
    assert nil > 0 and severity.notes[0].startswith(f"{nil} nil-claim rows")


def test_chunked_statistics_equal_one_pass(book):
    """Partial sums over 613-row chunks equal a single pass to 1e-12 relative."""
    design = OneHotDesign(("area",), (("a0", "a1", "a2", "a3"),), (0,), book[["area"]].to_numpy().astype(np.int32))
    beta_full = np.array([-1.2, 0.0, 0.1, 0.25, 0.4])
    count, exposure = book["count"].to_numpy(), book["exposure"].to_numpy()
    whole = row_statistics(design, beta_full, count, exposure, POISSON, 4)
    chunked = row_statistics(design, beta_full, count, exposure, POISSON, 4, chunk_rows=613)
    for name in ("deviance", "null_deviance", "pearson_chi2", "llf"):
        assert getattr(chunked, name) == pytest.approx(getattr(whole, name), rel=1e-12)


def test_row_order_does_not_change_the_model(book):
    """Shuffled rows give the same JSON (estimates to 1e-12), and the JSON form round-trips."""
    factors = {"area": labelled(book["area"], "a"), "cover": labelled(book["cover"], "c")}
    first = fit_pure_premium(inputs_of(book, factors), power=1.4)
    shuffled = book.sample(frac=1.0, random_state=3).reset_index(drop=True)
    second = fit_pure_premium(
        inputs_of(shuffled, {"area": labelled(shuffled["area"], "a"), "cover": labelled(shuffled["cover"], "c")}),
        power=1.4,
    )
    np.testing.assert_allclose(
        [r["estimate"] for r in first.coefficients], [r["estimate"] for r in second.coefficients], rtol=0, atol=1e-12
    )
    assert first.deviance == pytest.approx(second.deviance, rel=1e-12)
    text = json.dumps(first.to_json_dict())
    assert text == json.dumps(first.to_json_dict())
    restored = GlmResult.from_json_dict(json.loads(text))
    frame = pd.DataFrame(factors)
    np.testing.assert_allclose(restored.predict(frame), first.predict(frame), rtol=1e-14)
    assert "qualified actuary" in json.loads(text)["caution"]


def test_engine_choice_rule():
    """Cells when they are at most max(1000, 50 % of rows)."""
    assert choose_engine(1_000, 1_000) == "cells"
    assert choose_engine(1_500, 1_001) == "rows"
    assert choose_engine(1_000_000, 500_000) == "cells"
    assert choose_engine(1_000_000, 500_001) == "rows"


@pytest.mark.parametrize(
    "change, message",
    [
        ({"exposure": "zero"}, "exposure: 1 value(s) not > 0, first at row 7 (value 0.0)"),
        ({"claim_count": "fraction"}, "claim_count: 1 value(s) not a whole number >= 0, first at row 7 (value 0.5)"),
        ({"claim_amount": "orphan"}, "claim_amount: 1 value(s) not 0 where claim_count is 0, first at row"),
        ({"base_levels": {"area": "a9", "cover": "c0"}}, "base_levels['area']: 'a9' is not a level"),
        ({"control": ["year"]}, "control: 'year' is not a factor"),
    ],
)
def test_bad_inputs_are_refused_by_name(book, change, message):
    factors = {"area": labelled(book["area"], "a"), "cover": labelled(book["cover"], "c")}
    key, value = next(iter(change.items()))
    if value == "zero":
        value = book["exposure"].to_numpy().copy()
        value[7] = 0.0
    elif value == "fraction":
        value = book["count"].to_numpy().copy()
        value[7] = 0.5
    elif value == "orphan":
        value = book["amount"].to_numpy().copy()
        value[np.flatnonzero(book["count"].to_numpy() == 0)[0]] = 10.0
    with pytest.raises(InputError, match=re.escape(message)):
        inputs_of(book, factors, **{key: value})


def test_bad_calls_are_refused_by_name(book):
    factors = {"area": labelled(book["area"], "a"), "cover": labelled(book["cover"], "c")}
    inputs = inputs_of(book, factors)
    with pytest.raises(InputError, match="factor 'area': expected a pandas Categorical"):
        inputs_of(book, {"area": book["area"].to_numpy()}, base_levels={"area": "0"})
    with pytest.raises(InputError, match="engine: expected one of auto, cells, rows"):
        fit_frequency(inputs, engine="fast")
    with pytest.raises(InputError, match="power: expected 'auto' or a number strictly between 1 and 2"):
        fit_pure_premium(inputs, power=2.0)
    with pytest.raises(InputError, match="claim_amount: required for the severity model"):
        fit_severity(inputs_of(book, factors, claim_amount=None))
    with pytest.raises(InputError, match="penalty: expected one of credibility, none, got 'lasso'"):
        fit_frequency(inputs, penalty="lasso")
    with pytest.raises(InputError, match="factors: column 'cover' is missing"):
        fit_frequency(inputs).predict(pd.DataFrame(factors).drop(columns="cover"))


def test_a_numerical_failure_inside_an_engine_names_the_model(book, monkeypatch):
    """statsmodels raises ValueError when its first deviance is NaN; that reaches the user as one
    input error naming the model (the engine is replaced by one that fails the same way)."""

    def failing(*_args, **_kwargs):
        raise ValueError("The first guess on the deviance function returned a nan.")

    monkeypatch.setattr(glm, "fit_on_cells", failing)
    inputs = inputs_of(book, {"area": labelled(book["area"], "a"), "cover": labelled(book["cover"], "c")})
    with pytest.raises(InputError, match=r"the frequency GLM could not be fitted \(The first guess on the deviance"):
        fit_frequency(inputs, engine="cells")
