"""Reading and checking books: each finding names the column, the count and the first rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from premiumlab._core.errors import InputError
from premiumlab.book.bands import band_labels, quantile_edges
from premiumlab.book.levels import categorise, factor_levels
from premiumlab.book.reading import iter_book
from premiumlab.book.scan import _repeated_keys, load_book, profile, scan_book, with_quantile_bands
from premiumlab.book.spec import load_spec
from premiumlab.book.split import holdout_flags
from premiumlab.book.validate import validate_book

from _builders import small_book


def findings_for(tmp_path, spec_file, edit) -> list[str]:
    df = small_book()
    df = edit(df) if edit else df
    p = tmp_path / "b.csv"
    df.to_csv(p, index=False)
    _, _, findings = scan_book(p, load_spec(spec_file))
    return [str(f) for f in findings]


def _set(col, rows, value):
    def edit(df):
        df[col] = df[col].astype(object)
        df.loc[rows, col] = value
        return df

    return edit


EDITS = [
    (_set("exposure", [3, 9], -1.0), "column 'exposure': 2 rows with exposure <= 0 (rows 3, 9)"),
    (_set("exposure", [4], 0.0), "1 row with exposure <= 0 (rows 4)"),
    (_set("exposure", [5], ""), "with a missing exposure (rows 5)"),
    (_set("exposure", [6], "inf"), "with a non-finite exposure (rows 6)"),
    (_set("exposure", [7], "abc"), "non-numeric exposure (rows 7)"),
    (_set("exposure", [8], 1.5), "warning: "),
    (_set("claim_count", [2], 1.5), "fractional claim count (rows 2)"),
    (_set("claim_count", [2], -1), "negative claim count (rows 2)"),
    (_set("claim_count", [2], ""), "missing or non-finite claim count (rows 2)"),
    (_set("claim_amount", [11], -5.0), "negative claim amount (rows 11)"),
    (_set("age", [12], "old"), "column 'age': 1 row with a non-numeric value in a numeric factor (rows 12)"),
    (_set("region", [13], "(missing)"), "column 'region': 1 row with the level '(missing)'"),
    (_set("bonus", [14], "09"), "not in the spec's levels"),
    (lambda df: df.assign(region="Northmoor"), "factor 'region' has one level only"),
    (lambda df: df.assign(claim_count=0, claim_amount=0.0), "the book has no claims"),
    (
        lambda df: df.assign(region=df["bonus"].map({"01": "x", "02": "y", "03": "z"})),
        "factors 'region' and 'bonus' are identical up to relabelling",
    ),
    (
        lambda df: pd.concat([df, df.iloc[[0]]], ignore_index=True),
        "repeating an earlier ('policy_id', 'year') pair (rows 400)",
    ),
]


@pytest.mark.parametrize("edit, fragment", EDITS)
def test_each_check_names_column_count_and_rows(tmp_path, spec_file, edit, fragment):
    found = findings_for(tmp_path, spec_file, edit)
    assert any(fragment in f for f in found), found


def test_amount_with_zero_claims_and_nil_claims(tmp_path, spec_file):
    def edit(df):
        zero = df.index[df.claim_count == 0][:2]
        nil = df.index[df.claim_count > 0][:3]
        df.loc[zero, "claim_amount"] = 100.0
        df.loc[nil, "claim_amount"] = 0.0
        return df

    found = findings_for(tmp_path, spec_file, edit)
    assert any("2 rows with a positive amount but zero claims" in f for f in found)
    assert any(f.startswith("warning") and "3 rows with nil claims" in f for f in found)


def test_clean_book_has_no_errors_and_loads_typed(book_file, spec_file):
    spec = load_spec(spec_file)
    book = load_book(book_file, spec)
    assert book.n_rows == 400
    assert book.frame["age"].dtype == np.float64
    assert set(book.frame["bonus"]) == {"01", "02", "03"}  # "01" stays "01"
    assert len(book.sha256) == 64


def test_first_error_stops_load(tmp_path, spec_file):
    p = tmp_path / "b.csv"
    small_book().assign(exposure=0.0).to_csv(p, index=False)
    with pytest.raises(InputError, match="exposure <= 0"):
        load_book(p, load_spec(spec_file))


def test_missing_column_and_wrong_delimiter(tmp_path, spec_file):
    p = tmp_path / "b.csv"
    small_book().drop(columns=["region"]).to_csv(p, index=False)
    with pytest.raises(InputError, match="missing column 'region'"):
        load_book(p, load_spec(spec_file))
    small_book().to_csv(p, index=False, sep=";")
    with pytest.raises(InputError, match="delimiter"):
        load_book(p, load_spec(spec_file))


def test_split_is_stable_keeps_policies_together_and_has_the_right_share():
    rng = np.random.default_rng(0)
    policy = np.array([f"P{i}" for i in rng.integers(0, 50_000, 200_000)], dtype=object)
    flags = holdout_flags(policy, seed=2026, holdout=0.2)
    # same policy -> same flag
    frame = pd.DataFrame({"p": policy, "h": flags})
    assert frame.groupby("p")["h"].nunique().max() == 1
    # chunking and order do not matter
    parts = np.concatenate([holdout_flags(policy[i : i + 7_001], 2026, 0.2) for i in range(0, len(policy), 7_001)])
    assert np.array_equal(parts, flags)
    perm = rng.permutation(len(policy))
    assert np.array_equal(holdout_flags(policy[perm], 2026, 0.2), flags[perm])
    # share of policies held out: binomial, 50,000 policies -> sd 0.0018; 4 sd tolerance
    share = frame.drop_duplicates("p")["h"].mean()
    assert abs(share - 0.2) < 0.0072
    assert not holdout_flags(policy, 2026, 0.0).any()
    assert not np.array_equal(holdout_flags(policy, 2027, 0.2), flags)


def test_csv_chunks_and_parquet_agree(tmp_path, spec_file):
    df = small_book(1000)
    csv, pq = tmp_path / "b.csv", tmp_path / "b.parquet"
    df.to_csv(csv, index=False)
    df.to_parquet(pq, index=False)
    spec = load_spec(spec_file)
    a, b = load_book(csv, spec), load_book(pq, spec)
    assert np.array_equal(a.exposure, b.exposure) and np.array_equal(a.holdout, b.holdout)
    assert a.frame.astype(str).equals(b.frame.astype(str))
    offsets = [off for off, _ in iter_book(csv, ["exposure"], chunk_rows=300)]
    assert offsets == [0, 300, 600, 900]


def _scan(tmp_path, spec_file, df, chunk_rows):
    p = tmp_path / "b.csv"
    df.to_csv(p, index=False)
    spec = load_spec(spec_file)
    _, summary, findings = scan_book(p, spec, keep_rows=False, chunk_rows=chunk_rows)
    return summary, [str(f) for f in findings], spec


@pytest.mark.parametrize(
    "edit", [e for e, _ in EDITS] + [lambda df: pd.concat([df, df.iloc[[3, 150, 3]]], ignore_index=True)]
)
def test_findings_do_not_depend_on_the_chunk_size(tmp_path, spec_file, edit):
    """The book-level checks are summed chunk by chunk: chunks of 7 rows and one chunk agree."""
    df = edit(small_book())
    _, one, _ = _scan(tmp_path, spec_file, df, 10_000)
    _, many, _ = _scan(tmp_path, spec_file, df, 7)
    assert many == one


def test_repeats_are_found_across_chunks_and_confirmed_on_the_text(tmp_path, spec_file):
    df = pd.concat([small_book(), small_book().iloc[[3, 150, 3]]], ignore_index=True)
    _, found, spec = _scan(tmp_path, spec_file, df, 7)
    assert any("3 rows repeating an earlier ('policy_id', 'year') pair (rows 400, 401, 402)" in f for f in found)
    # a key hash that collides with no repeated text is not reported: rows 5 and 9 differ
    keys = pd.util.hash_pandas_object(df[["policy_id", "year"]].astype(str), index=False).to_numpy()
    p = tmp_path / "b.csv"
    assert _repeated_keys(p, spec, keys[[5, 9]]).size == 0
    assert _repeated_keys(p, spec, keys[[3, 150]]).tolist() == [400, 401, 402]


def test_profile_equals_a_pandas_groupby_of_the_whole_book(tmp_path, spec_file):
    """Reference: pandas groupby over the rows, bands cut with pandas.cut (lower edge inclusive)."""
    df = small_book(3000, seed=11)
    summary, found, spec = _scan(tmp_path, spec_file, df, 333)
    assert not [f for f in found if f.startswith("error")]
    prof = profile(summary, spec)
    bands = pd.cut(df["age"], [-np.inf, 25, 40, 60, np.inf], right=False)
    for name, key in (("age", bands), ("region", df["region"]), ("bonus", df["bonus"])):
        ref = df.groupby(key, observed=False)[["exposure", "claim_count", "claim_amount"]].sum()
        np.testing.assert_allclose(prof[name][["exposure", "claims", "amount"]].to_numpy(), ref.to_numpy(), rtol=1e-12)
    overall = prof["(overall)"].iloc[0]
    assert overall["frequency"] == pytest.approx(df["claim_count"].sum() / df["exposure"].sum(), rel=1e-12)
    assert overall["severity"] == pytest.approx(df["claim_amount"].sum() / df["claim_count"].sum(), rel=1e-12)


def test_quantile_edges_sit_just_above_numpy_weighted_quantiles():
    """Reference: numpy.quantile(..., weights=, method="inverted_cdf") gives the smallest value whose
    cumulative weight share reaches q; each edge is the next distinct value above it."""
    rng = np.random.default_rng(5)
    values = rng.integers(17, 95, 20_000).astype(float)
    weights = rng.uniform(0.1, 1.0, values.size)
    edges = quantile_edges(values, weights, 8)
    uniq = np.unique(values)
    q = np.quantile(values, np.arange(1, 8) / 8, weights=weights, method="inverted_cdf")
    expected = np.unique(uniq[np.searchsorted(uniq, q, side="right")])
    np.testing.assert_array_equal(edges, expected)
    perm = rng.permutation(values.size)
    np.testing.assert_array_equal(quantile_edges(values[perm], weights[perm], 8), edges)
    summed = pd.Series(weights).groupby(values).sum()
    np.testing.assert_array_equal(quantile_edges(summed.index.to_numpy(), summed.to_numpy(), 8), edges)


def test_an_unbanded_numeric_factor_is_profiled_on_the_whole_books_exposure_quantiles(tmp_path, spec_file):
    """`age` without bands (n_bands = 4), read in chunks of 333 rows: its profile bands are
    `quantile_edges` of the whole column (reference: numpy's weighted inverted-CDF quantile, see
    the test above) and each band's sums equal a pandas groupby of the rows."""
    spec_path = tmp_path / "unbanded.toml"
    spec_path.write_text(spec_file.read_text().replace("bands = [25, 40, 60]", "n_bands = 4"))
    df = small_book(3000, seed=11).assign(
        age=lambda d: d["age"] + np.round(np.random.default_rng(2).uniform(0, 1, len(d)), 3)
    )  # about one distinct value a row
    summary, _found, spec = _scan(tmp_path, spec_path, df, 333)
    assert summary.levels["age"].values.size == 0  # no distinct values kept while scanning
    banded, summary = with_quantile_bands(tmp_path / "b.csv", spec, summary, chunk_rows=333)
    edges = quantile_edges(df["age"].to_numpy(), df["exposure"].to_numpy(), 4)
    assert banded.factor("age").bands == tuple(edges)
    prof = profile(summary, banded)["age"]
    assert list(prof.index) == band_labels(edges)
    ref = df.groupby(pd.cut(df["age"], [-np.inf, *edges, np.inf], right=False), observed=False)[
        ["exposure", "claim_count", "claim_amount"]
    ].sum()
    np.testing.assert_allclose(prof[["exposure", "claims", "amount"]].to_numpy(), ref.to_numpy(), rtol=1e-12)


def test_band_edges_differing_in_the_seventh_digit_keep_distinct_labels_in_validate_and_fit(tmp_path, spec_file):
    """Edges 1234567, 1234568 and 1234569 all read 1.23457e+06 in `g` format; band labels write edges
    as exact text, as the filed rating table does (`rating_tables.table.band_label`), so `validate`'s
    profile and `fit`'s levels keep four distinct bands."""
    spec_path = tmp_path / "close.toml"
    spec_path.write_text(spec_file.read_text().replace("bands = [25, 40, 60]", "bands = [1234567, 1234568, 1234569]"))
    df = small_book().assign(age=lambda d: 1234566 + np.arange(len(d)) % 5)
    df.to_csv(tmp_path / "b.csv", index=False)
    expected = ["[-inf, 1234567)", "[1234567, 1234568)", "[1234568, 1234569)", "[1234569, inf)"]
    report = validate_book(tmp_path / "b.csv", spec_path)
    assert not report.errors
    assert list(report.profile["age"].index) == expected
    assert report.profile["age"]["exposure"].tolist() == pytest.approx(
        df.groupby(np.minimum(np.arange(len(df)) % 5, 3))["exposure"].sum().tolist(), rel=1e-12
    )
    spec = load_spec(spec_path)
    book = load_book(tmp_path / "b.csv", spec)
    levels = factor_levels(book, spec, ~book.holdout)
    assert levels["age"].labels == tuple(expected)
    assert categorise(book.frame, levels)["age"].astype(str).tolist()[:5] == [*expected, expected[3]]
