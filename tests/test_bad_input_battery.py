"""The bad-input battery: every bad spec, book, table or output path gets one clear answer.

Source of the expectations: the command-line contract of docs/commands.md (exit 2 for bad input or usage
with one line on stderr naming the file, column, row or key and no traceback; exit 1 when `audit`
or `validate` finds violations, listed on stdout; a failed command leaves nothing at the target
path and never modifies its inputs). Each case runs `premiumlab` as a subprocess, as a user would,
in its own folder holding a small spec, book, rating table and book of policies; afterwards the
folder must hold exactly the files it held before, byte for byte (so nothing is at the target,
no temporary folder is left and no input changed). A "must work" case (a byte-order mark) exits 0
and leaves its inputs byte-identical. The cases run two at a time (the machine has 2 cores).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import rating_tables

from _builders import ROOT, SPEC_TEXT, example_book, example_table, run_cli, small_book

Prepare = Callable[[Path], None]


# ------------------------------------------------------------------------------- the inputs of a case


def _write_defaults(folder: Path) -> None:
    """spec.toml + book.csv (a pricing book), table/ + policies.csv (a table and a book to rate)."""
    (folder / "spec.toml").write_text(SPEC_TEXT)
    small_book(60).to_csv(folder / "book.csv", index=False)
    rating_tables.save(example_table(), folder / "table")
    example_book().to_csv(folder / "policies.csv", index=False)


def spec(old: str, new: str) -> Prepare:
    """Replace `old` by `new` once in spec.toml."""

    def prepare(folder: Path) -> None:
        text = (folder / "spec.toml").read_text()
        assert old in text, old
        (folder / "spec.toml").write_text(text.replace(old, new, 1))

    return prepare


def raw(name: str, edit: Callable[[bytes], bytes]) -> Prepare:
    """Rewrite the bytes of file `name`."""

    def prepare(folder: Path) -> None:
        (folder / name).write_bytes(edit((folder / name).read_bytes()))

    return prepare


def book(edit: Callable[[pd.DataFrame], pd.DataFrame], name: str = "book.csv") -> Prepare:
    """Write the edited small book to `name` (CSV or Parquet by extension)."""

    def prepare(folder: Path) -> None:
        frame = edit(small_book(60))
        if name.endswith(".parquet"):
            frame.to_parquet(folder / name, index=False)
        else:
            frame.to_csv(folder / name, index=False)

    return prepare


def policies(edit: Callable[[pd.DataFrame], pd.DataFrame]) -> Prepare:
    """Write the edited book of policies to policies.csv."""

    def prepare(folder: Path) -> None:
        edit(example_book()).to_csv(folder / "policies.csv", index=False)

    return prepare


def table(name: str, old: str, new: str) -> Prepare:
    """Replace `old` by `new` once in the table file `name`."""
    return raw(f"table/{name}", lambda b: _replace(b, old, new))


def _replace(data: bytes, old: str, new: str) -> bytes:
    assert old.encode() in data, old
    return data.replace(old.encode(), new.encode(), 1)


def make(*steps: Prepare | Callable[[Path], object]) -> Prepare:
    """Run several preparation steps in order."""

    def prepare(folder: Path) -> None:
        for step in steps:
            step(folder)

    return prepare


def _parquet(folder: Path) -> None:
    small_book(60).to_parquet(folder / "book.parquet", index=False)


def _truncate(name: str) -> Prepare:
    return raw(name, lambda b: b[: len(b) // 2])


def _with_zone(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.assign(zone=frame["region"].map({"Northmoor": "Z1", "Eastvale": "Z2", "Southby": "Z3"}))


# ---------------------------------------------------- issue 11: runs, models, nested books, limits
#: The run of the run-based cases: fitted once per battery (GLM and a quick boosted search) on a
#: book whose region levels start with "=" and "@" and hold a control character, then copied.
RUN_SPEC = SPEC_TEXT + "\n[gbm]\nfolds = 2\nmax_settings = 1\nmax_rounds = 50\n"
HOSTILE_REGIONS = {"Northmoor": "=1+1", "Eastvale": "@SUM(A1)\x07"}
_MADE: dict[str, object] = {}


def _run_book() -> pd.DataFrame:
    frame = small_book(400)
    return frame.assign(region=frame["region"].replace(HOSTILE_REGIONS))


def _fitted(folder: Path) -> None:
    """run/ (fitted on runbook.csv) and runbook.csv, copied from the battery's one fitted run."""
    source = folder.parent / "_fitted"
    if not source.exists():
        source.mkdir()
        (source / "runspec.toml").write_text(RUN_SPEC)
        _run_book().to_csv(source / "runbook.csv", index=False)
        done = run_cli("fit", "runbook.csv", "--spec", "runspec.toml", "--out", "run", cwd=source, timeout=300)
        assert done.returncode == 0, done.stderr
    shutil.copytree(source / "run", folder / "run")
    shutil.copy(source / "runbook.csv", folder / "runbook.csv")


def in_run(name: str, edit: Callable[[bytes], bytes]) -> Prepare:
    """The fitted run, then file `name` of it rewritten."""
    return make(_fitted, raw(f"run/{name}", edit))


def manifest(edit: Callable[[dict], object]) -> Prepare:
    """The fitted run with run.json edited as JSON."""

    def rewrite(data: bytes) -> bytes:
        document = json.loads(data)
        edit(document)
        return json.dumps(document).encode()

    return in_run("run.json", rewrite)


def _model_text() -> str:
    """A small LightGBM Poisson model (3 trees of 5 leaves, a categorical split at each root) on
    invented rows; built once."""
    if "model" not in _MADE:
        rng = np.random.default_rng(5)
        n = 600
        features = pd.DataFrame(
            {"age": rng.integers(18, 80, n).astype(float), "region": pd.Categorical(rng.choice(list("abcde"), n))}
        )
        counts = rng.poisson(np.exp(-1 + 0.02 * features["age"] + 0.8 * features["region"].isin(["b", "d"])))
        params = {"objective": "poisson", "num_leaves": 5, "min_data_in_leaf": 20, "verbose": -1, "seed": 1}
        params |= {"num_threads": 1, "min_data_per_group": 5, "cat_smooth": 1, "max_cat_to_onehot": 1}
        _MADE["model"] = lgb.train(params, lgb.Dataset(features, counts), num_boost_round=3).model_to_string()
    return str(_MADE["model"])


def model(old: str = "", new: str = "", cut: int | None = None) -> Prepare:
    """model.txt: the small model with `old` replaced by `new` once, or cut to `cut` characters
    (negative: that many from the end)."""

    def prepare(folder: Path) -> None:
        text = _model_text()
        if old:
            assert old in text, old
            text = text.replace(old, new, 1)
        (folder / "model.txt").write_text(text if cut is None else text[:cut])

    return prepare


def _parquet_with(column: str, values: Callable[[int], pa.Array], name: str = "book.parquet") -> Prepare:
    """book.parquet: the small book with one more column made by `values(rows)`."""

    def prepare(folder: Path) -> None:
        table = pa.Table.from_pandas(small_book(60), preserve_index=False)
        pq.write_table(table.append_column(column, values(table.num_rows)), folder / name)

    return prepare


def _duplicate_parquet(folder: Path) -> None:
    table = pa.Table.from_pandas(small_book(60), preserve_index=False)
    pq.write_table(table.append_column("region", table.column("region")), folder / "book.parquet")


def _duplicate_header(name: str) -> Prepare:
    """CSV `name` with its 'region' column given a second time at the end (different values)."""

    def edit(data: bytes) -> bytes:
        head, *rows = data.decode().splitlines()
        return ("\n".join([head + ",region", *(row + ",Elsewhere" for row in rows)]) + "\n").encode()

    return raw(name, edit)


def _mixed_folder(folder: Path) -> None:
    (folder / "parts").mkdir()
    small_book(60).iloc[:30].to_csv(folder / "parts" / "a.csv", index=False)
    small_book(60).iloc[30:].to_parquet(folder / "parts" / "b.parquet", index=False)


def _deep_spec(depth: int) -> Prepare:
    return spec("[split]", "[split]\nextra = " + "[" * depth + "]" * depth + "\n")


def _scenario(edit: Callable[[str], str] = lambda t: t) -> Prepare:
    def prepare(folder: Path) -> None:
        (folder / "scenario.toml").write_text(edit((ROOT / "scenarios" / "motor.toml").read_text()))

    return prepare


def _link(name: str, to: str) -> Prepare:
    return lambda folder: (folder / name).symlink_to(to)


TABULATE = "tabulate run --out newtable"
CERTIFY = "certify model.txt --factor age --direction increasing"

ZONE = "[factors.zone]\ntype = 'categorical'\n[factors.region]"
FIT = "fit book.csv --spec spec.toml --out run --models glm"
RATE = "rate table policies.csv --out priced.csv"
BOM = b"\xef\xbb\xbf"

# ------------------------------------------------------------------------------------------ the table
# id, command line (paths relative to the case folder), exit code, message fragment, preparation
CASES: list[tuple[str, str, int, str, Prepare | None]] = [
    # the spec
    ("spec-malformed-toml", FIT, 2, "spec.toml: malformed TOML", spec("[columns]", "[columns\n")),
    ("spec-wrong-type", FIT, 2, "key 'split.seed' must be an integer, got 'seven'", spec("seed = 7", "seed = 'seven'")),
    (
        "spec-wrong-type-in-list",
        FIT,
        2,
        "key 'factors.age.bands[1]' must be a number",
        spec("bands = [25, 40, 60]", "bands = [25, '40', 60]"),
    ),
    ("spec-unknown-key", FIT, 2, "key 'split.seeed' is unknown", spec("seed = 7", "seeed = 7")),
    ("spec-unknown-section", FIT, 2, "key 'modle' is unknown", spec("[split]", "[modle]\nx = 1\n[split]")),
    (
        "spec-unknown-factor-type",
        FIT,
        2,
        "key 'factors.region.type' must be one of numeric, categorical",
        spec('type = "categorical"', 'type = "ordinal"'),
    ),
    (
        "spec-bands-not-increasing",
        FIT,
        2,
        "key 'factors.age.bands' must be strictly increasing",
        spec("bands = [25, 40, 60]", "bands = [25, 60, 40]"),
    ),
    (
        "spec-required-key-missing",
        FIT,
        2,
        "key 'columns.claim_count' is required",
        spec('claim_count = "claim_count"\n', ""),
    ),
    (
        "spec-monotone-unordered",
        FIT,
        2,
        "unordered categorical",
        spec(
            '[factors.region]\ntype = "categorical"',
            "[factors.region]\ntype = \"categorical\"\nmonotone = 'increasing'",
        ),
    ),
    (
        "spec-prohibited-factor",
        FIT,
        2,
        "factor 'gender' is prohibited",
        spec("[factors.region]", "[factors.gender]\ntype = 'categorical'\n[factors.region]"),
    ),
    ("spec-not-utf8", FIT, 2, "spec.toml: not UTF-8 text (byte", raw("spec.toml", lambda b: b + b"# caf\xe9\n")),
    ("spec-is-a-directory", "fit book.csv --spec table --out run", 2, "table: is a directory, expected a spec", None),
    ("spec-missing", "fit book.csv --spec nospec.toml --out run", 2, "nospec.toml: spec file not found", None),
    (
        "spec-byte-order-mark-works",
        "validate book.csv --spec spec.toml",
        0,
        "0 error(s)",
        raw("spec.toml", lambda b: BOM + b),
    ),
    # the book's columns and bytes
    (
        "book-missing-column",
        FIT,
        2,
        "book.csv: missing column 'claim_count'",
        book(lambda d: d.drop(columns="claim_count")),
    ),
    (
        "book-renamed-column",
        FIT,
        2,
        "book.csv: missing column 'exposure'",
        book(lambda d: d.rename(columns={"exposure": "Exposure"})),
    ),
    ("book-empty-file", FIT, 2, "book.csv: empty file, no header row", raw("book.csv", lambda b: b"")),
    (
        "book-header-only",
        FIT,
        2,
        "book.csv: the book has no rows",
        raw("book.csv", lambda b: b.split(b"\n")[0] + b"\n"),
    ),
    ("book-wrong-delimiter", FIT, 2, "is the delimiter a comma?", raw("book.csv", lambda b: b.replace(b",", b";"))),
    (
        "book-not-utf8",
        FIT,
        2,
        "book.csv: not UTF-8 text (byte",
        raw("book.csv", lambda b: b.replace(b"Southby", b"S\xf6uthby")),
    ),
    (
        "book-byte-order-mark-works",
        "validate book.csv --spec spec.toml",
        0,
        "0 error(s)",
        raw("book.csv", lambda b: BOM + b),
    ),
    (
        "book-ragged-row",
        FIT,
        2,
        "book.csv: malformed CSV (Error tokenizing data. C error: Expected 8 fields in line 62, saw 10)",
        raw("book.csv", lambda b: b + b"1,2,3,4,5,6,7,8,9,10\n"),
    ),
    (
        "book-unsupported-extension",
        "fit book.txt --spec spec.toml --out run",
        2,
        "unsupported book format '.txt'",
        lambda f: (f / "book.txt").write_bytes((f / "book.csv").read_bytes()),
    ),
    ("book-missing", "fit nobook.csv --spec spec.toml --out run", 2, "nobook.csv: the book does not exist", None),
    (
        "book-directory-without-parts",
        "fit table --spec spec.toml --out run",
        2,
        "is a directory with no .csv, .parquet or .pq parts",
        None,
    ),
    (
        "book-truncated-parquet",
        "fit book.parquet --spec spec.toml --out run",
        2,
        "book.parquet: not a readable Parquet file",
        make(_parquet, _truncate("book.parquet")),
    ),
    # the book's values
    (
        "book-nan-exposure",
        FIT,
        2,
        "column 'exposure': 1 row with a missing exposure (rows 3)",
        book(lambda d: d.assign(exposure=d["exposure"].mask(d.index == 3))),
    ),
    (
        "book-inf-exposure",
        FIT,
        2,
        "column 'exposure': 1 row with a non-finite exposure (rows 4)",
        book(lambda d: d.assign(exposure=d["exposure"].mask(d.index == 4, float("inf")))),
    ),
    (
        "book-negative-exposure",
        FIT,
        2,
        "column 'exposure': 1 row with exposure <= 0 (rows 5)",
        book(lambda d: d.assign(exposure=d["exposure"].mask(d.index == 5, -0.5))),
    ),
    (
        "book-zero-exposure",
        FIT,
        2,
        "column 'exposure': 2 rows with exposure <= 0 (rows 0, 9)",
        book(lambda d: d.assign(exposure=d["exposure"].mask(d.index.isin([0, 9]), 0.0))),
    ),
    (
        "book-text-exposure",
        FIT,
        2,
        "column 'exposure': 1 row with a non-numeric exposure (rows 2)",
        book(
            lambda d: d.astype({"exposure": object}).assign(exposure=lambda x: x["exposure"].mask(x.index == 2, "half"))
        ),
    ),
    (
        "book-fractional-count",
        FIT,
        2,
        "column 'claim_count': 1 row with a fractional claim count (rows 7)",
        book(lambda d: d.assign(claim_count=d["claim_count"].mask(d.index == 7, 1.5))),
    ),
    (
        "book-negative-count",
        FIT,
        2,
        "column 'claim_count': 1 row with a negative claim count (rows 8)",
        book(lambda d: d.assign(claim_count=d["claim_count"].mask(d.index == 8, -1))),
    ),
    (
        "book-amount-without-claims",
        FIT,
        2,
        "positive amount but zero claims in 'claim_count'",
        book(lambda d: d.assign(claim_amount=d["claim_amount"].mask(d["claim_count"] == 0, 100.0))),
    ),
    (
        "book-absurd-amount",
        FIT,
        2,
        "column 'claim_amount': 1 row with a claim amount of 1e+15 or more (check the units)",
        book(
            lambda d: d.assign(claim_amount=d["claim_amount"].mask(d.index == d.index[d["claim_count"] > 0][0], 1e308))
        ),
    ),
    (
        "book-no-claims",
        FIT,
        2,
        "the book has no claims (column 'claim_count' sums to 0)",
        book(lambda d: d.assign(claim_count=0, claim_amount=0.0)),
    ),
    (
        "book-one-level-factor",
        FIT,
        2,
        "factor 'region' has one level only (Eastvale)",
        book(lambda d: d.assign(region="Eastvale")),
    ),
    (
        "book-identical-factors",
        FIT,
        2,
        "factors 'zone' and 'region' are identical up to relabelling",
        make(spec("[factors.region]", ZONE), book(_with_zone)),
    ),
    (
        "book-level-not-in-spec",
        FIT,
        2,
        "column 'bonus': 1 row with a level not in the spec's levels",
        book(lambda d: d.assign(bonus=d["bonus"].mask(d.index == 11, "04"))),
    ),
    (
        "book-repeated-policy-period",
        FIT,
        2,
        "repeating an earlier ('policy_id', 'year') pair (rows 1)",
        book(lambda d: d.assign(policy_id=d["policy_id"].mask(d.index == 1, "Q00000"))),
    ),
    (
        "validate-lists-findings",
        "validate book.csv --spec spec.toml",
        1,
        "1 row with exposure <= 0 (rows 5)",
        book(lambda d: d.assign(exposure=d["exposure"].mask(d.index == 5, -0.5))),
    ),
    # output paths
    (
        "fit-out-under-missing-folder",
        "fit book.csv --spec spec.toml --out nofolder/run",
        2,
        "nofolder/run: the folder nofolder does not exist",
        None,
    ),
    (
        "fit-out-under-regular-file",
        "fit book.csv --spec spec.toml --out book.csv/run",
        2,
        "book.csv/run: book.csv is not a folder",
        None,
    ),
    (
        "fit-out-exists",
        "fit book.csv --spec spec.toml --out table --models glm",
        2,
        "table: already exists; use --force",
        None,
    ),
    (
        "rate-out-under-missing-folder",
        "rate table policies.csv --out nofolder/priced.csv",
        2,
        "the folder nofolder does not exist",
        None,
    ),
    (
        "rate-out-under-regular-file",
        "rate table policies.csv --out policies.csv/priced.csv",
        2,
        "policies.csv is not a folder",
        None,
    ),
    (
        "rate-out-exists",
        "rate table policies.csv --out priced.csv",
        2,
        "priced.csv: already exists; use --force",
        lambda f: (f / "priced.csv").write_text("kept\n"),
    ),
    (
        "rate-out-wrong-extension",
        "rate table policies.csv --out priced.txt",
        2,
        "priced.txt: the output must end in",
        None,
    ),
    (
        "fit-force-onto-the-book",
        "fit book.csv --spec spec.toml --out book.csv --force --models glm",
        2,
        "book.csv: is or holds the input book.csv; write the output elsewhere",
        None,
    ),
    (
        "fit-force-onto-a-folder-holding-the-book",
        "fit book.csv --spec spec.toml --out . --force --models glm",
        2,
        ".: is or holds the input book.csv",
        None,
    ),
    (
        "rate-force-onto-the-input",
        "rate table policies.csv --out policies.csv --force",
        2,
        "policies.csv: is or holds the input policies.csv",
        None,
    ),
    (
        "rate-force-onto-a-folder",
        "rate table policies.csv --out old.csv --force",
        2,
        "old.csv: is a folder; the output is a file",
        lambda f: (f / "old.csv").mkdir(),
    ),
    (
        "simulate-out-wrong-extension",
        "simulate scenario.toml --out sim.txt --policies 50",
        2,
        "premiumlab: sim.txt: the book must end in .csv or .parquet",
        lambda f: (f / "scenario.toml").write_bytes((ROOT / "scenarios" / "motor.toml").read_bytes()),
    ),
    (
        "simulate-out-under-regular-file",
        "simulate scenario.toml --out book.csv/sim.csv",
        2,
        "book.csv is not a folder",
        lambda f: (f / "scenario.toml").write_text(""),
    ),
    # the rating table
    (
        "table-gap",
        RATE,
        2,
        "factors/age.csv: factor 'age', data row 2 (1-based): gap between",
        table("factors/age.csv", "25.0,60.0,1.0", "26.0,60.0,1.0"),
    ),
    (
        "table-overlap",
        RATE,
        2,
        "factors/age.csv: factor 'age', data row 2 (1-based): overlap",
        table("factors/age.csv", "25.0,60.0,1.0", "24.0,60.0,1.0"),
    ),
    (
        "table-zero-relativity",
        RATE,
        2,
        "data row 2 (1-based): relativity 0 must be finite and > 0",
        table("factors/region.csv", "South,0.875", "South,0.0"),
    ),
    (
        "table-negative-relativity",
        RATE,
        2,
        "data row 3 (1-based): relativity -1.25 must be finite and > 0",
        table("factors/bonus.csv", "03,1.25", "03,-1.25"),
    ),
    (
        "table-missing-factor-file",
        RATE,
        2,
        "factors/bonus.csv: factor 'bonus': file not found",
        lambda f: (f / "table/factors/bonus.csv").unlink(),
    ),
    ("table-malformed-json", RATE, 2, "table.json: cannot be read as JSON", table("table.json", "{", "{{")),
    ("table-is-a-file", "rate policies.csv policies.csv --out priced.csv", 2, "policies.csv: table.json", None),
    (
        "table-gap-audit",
        "audit table",
        1,
        "gap between the previous band's upper 25 and this band's lower 26",
        table("factors/age.csv", "25.0,60.0,1.0", "26.0,60.0,1.0"),
    ),
    (
        "table-level-missing",
        RATE,
        2,
        "factor 'bonus': level '04' at book row 3 (0-based) is not in the table",
        policies(lambda d: d.assign(bonus=["03", "01", "02", "04", "01"])),
    ),
    (
        "rate-missing-value-without-missing-row",
        RATE,
        2,
        "factor 'age': missing value at book row 1 (0-based) and the table has no missing row for it",
        policies(lambda d: d.assign(age=[22.0, None, 70.0, 27.0, 35.0])),
    ),
    (
        "rate-strict-levels-unknown-level",
        RATE + " --strict-levels",
        2,
        "factor 'region': level 'Atlantis' at book row 3 (0-based) is not in the table and strict levels refuse it",
        None,
    ),
    (
        "rate-book-missing-column",
        RATE,
        2,
        "policies.csv: the book has no column 'bonus'",
        policies(lambda d: d.drop(columns="bonus")),
    ),
    (
        "rate-negative-exposure",
        RATE,
        2,
        "exposure column 'exposure': value -1.0 at book row 2 (0-based)",
        policies(lambda d: d.assign(exposure=[1.0, 0.5, -1.0, 0.25, 0.1])),
    ),
    (
        "rate-premium-overflow",
        RATE,
        2,
        "premium at book row 1 (0-based) is too large to represent (exposure 1e+308)",
        policies(lambda d: d.assign(exposure=[1.0, 1e308, 1.0, 0.25, 0.1])),
    ),
    (
        "rate-empty-book",
        "rate table empty.csv --out priced.csv",
        2,
        "premiumlab: empty.csv: cannot be read",
        lambda f: (f / "empty.csv").write_bytes(b""),
    ),
    (
        "rate-header-only-book",
        "rate table policies.csv --out priced.csv",
        2,
        "premiumlab: policies.csv: the book has no rows",
        raw("policies.csv", lambda b: b.split(b"\n")[0] + b"\n"),
    ),
    (
        "rate-truncated-parquet",
        "rate table book.parquet --out priced.csv",
        2,
        "premiumlab: book.parquet: cannot be read: Parquet magic bytes not found",
        make(_parquet, _truncate("book.parquet")),
    ),
    (
        "rate-byte-order-mark-works",
        "rate table policies.csv --out priced.csv",
        0,
        "wrote priced.csv",
        make(policies(lambda d: d[["age", "policy", "region", "bonus", "exposure"]]), raw("policies.csv", BOM.__add__)),
    ),
    # usage
    (
        "usage-wrong-option-type",
        "simulate scenario.toml --out sim.csv --policies many",
        2,
        "premiumlab: simulate: Invalid value for '--policies'",
        None,
    ),
    ("usage-missing-option", "fit book.csv --out run", 2, "premiumlab: fit: Missing option '--spec'.", None),
    (
        "usage-unknown-option",
        "rate table policies.csv --out priced.csv --colour red",
        2,
        "premiumlab: rate: No such option: --colour",
        None,
    ),
    (
        "usage-model-kind-twice",
        "fit book.csv --spec spec.toml --out run --models glm,glm",
        2,
        "premiumlab: --models: model kind glm named more than once",
        None,
    ),
    (
        "usage-bad-cluster-address",
        "fit book.csv --spec spec.toml --out run --cluster myhost:8786",
        2,
        "premiumlab: --cluster: 'myhost:8786': give local:N",
        None,
    ),
    ("usage-unknown-command", "frobnicate book.csv", 2, "premiumlab: No such command 'frobnicate'.", None),
    # other commands
    (
        "simulate-malformed-scenario",
        "simulate scenario.toml --out sim.csv",
        2,
        "scenario.toml: malformed TOML",
        lambda f: (f / "scenario.toml").write_text("[portfolio\n"),
    ),
    ("compare-not-a-run", "compare table", 2, "table: not a run directory (no run.json)", None),
    (
        "audit-bounds-reversed",
        "audit table --bounds 5 0.2",
        2,
        "--bounds: 5 0.2 must be finite with 0 < LOW < HIGH",
        None,
    ),
    (
        "compare-bounds-negative",
        "compare table --bounds -1 5",
        2,
        "--bounds: -1 5 must be finite with 0 < LOW < HIGH",
        None,
    ),
    ("tabulate-unknown-model", "tabulate table --out out --model tree", 2, "--model: unknown model 'tree'", None),
    (
        "certify-not-a-model",
        "certify policies.csv --factor age --direction increasing",
        2,
        "policies.csv: model text: no 'feature_names' line",
        None,
    ),
    (
        "impact-missing-premium-column",
        "impact policies.csv --current column:premium --proposed table",
        2,
        "column:premium: the book has no column 'premium'",
        None,
    ),
    # ---- issue 11: outputs never over, around or inside an input (item 1)
    (
        "tabulate-force-onto-the-runs-own-book",
        "tabulate run --out runbook.csv --force",
        2,
        "runbook.csv: is or holds the input run/../runbook.csv",
        _fitted,
    ),
    ("tabulate-force-onto-the-run", "tabulate run --out run --force", 2, "run: is or holds the input run", _fitted),
    (
        "tabulate-force-into-the-runs-models",
        "tabulate run --out run/models --force",
        2,
        "run/models: lies inside the input run",
        _fitted,
    ),
    ("tabulate-into-the-run", "tabulate run --out run/table", 2, "run/table: lies inside the input run", _fitted),
    (
        "tabulate-force-onto-the-book-option",
        "tabulate run --out policies.csv --book policies.csv --force",
        2,
        "policies.csv: is or holds the input policies.csv",
        _fitted,
    ),
    (
        "rate-force-into-the-table",
        "rate table policies.csv --out table/factors/age.csv --force",
        2,
        "table/factors/age.csv: lies inside the input table",
        None,
    ),
    (
        "impact-force-onto-the-tables-manifest",
        "impact policies.csv --current table --proposed table --out table/table.json --force",
        2,
        "table/table.json: lies inside the input table",
        None,
    ),
    (
        "impact-figure-into-the-table",
        "impact policies.csv --current table --proposed table --figure table/f.png",
        2,
        "table/f.png: lies inside the input table",
        None,
    ),
    (
        "rate-force-onto-a-link-to-the-book",
        "rate table policies.csv --out priced.csv --force",
        2,
        "priced.csv: is or holds the input policies.csv",
        _link("priced.csv", "policies.csv"),
    ),
    (
        "fit-force-onto-a-link-to-the-spec",
        "fit book.csv --spec spec.toml --out run --force --models glm",
        2,
        "run: is or holds the input spec.toml",
        _link("run", "spec.toml"),
    ),
    (
        "compare-force-onto-the-runs-book",
        "compare run --out runbook.csv --force",
        2,
        "runbook.csv: is or holds the input run/../runbook.csv",
        _fitted,
    ),
    (
        "compare-force-onto-the-models",
        "compare run --out run/models --force",
        2,
        "run/models: is or holds the input run/models",
        _fitted,
    ),
    ("compare-out-inside-the-run", "compare run --out run/cmp", 2, "run/cmp: lies inside the input run", _fitted),
    (
        "compare-again-without-force",
        "compare run",
        2,
        "run/figures: already exists; use --force",
        make(_fitted, lambda f: (f / "run" / "figures").mkdir()),
    ),
    (
        "compare-link-in-the-run-to-the-book",
        "compare run --force",
        2,
        "run/comparison.json: is or holds the input run/../runbook.csv",
        make(_fitted, _link("run/comparison.json", "../runbook.csv")),
    ),
    (
        "compare-out-exists",
        "compare run --out cmp",
        2,
        "cmp: already exists; use --force",
        make(_fitted, lambda f: (f / "cmp").mkdir()),
    ),
    (
        "compare-out-under-missing-folder",
        "compare run --out nofolder/cmp",
        2,
        "the folder nofolder does not exist",
        _fitted,
    ),
    ("compare-into-a-new-folder-works", "compare run --out cmp", 0, "pure_premium", _fitted),
    # ---- issue 11: report writes like every command and reads hand-edited runs in one line
    (
        "report-force-onto-a-link-to-the-book",
        "report run --force",
        2,
        "run/report.html: is or holds the input run/../runbook.csv",
        make(_fitted, _link("run/report.html", "../runbook.csv")),
    ),
    (
        "report-out-inside-the-table",
        "report run --table table --out table/report.html",
        2,
        "table/report.html: lies inside the input table",
        _fitted,
    ),
    (
        "report-comparison-without-a-key",
        "report run",
        2,
        "run/comparison.json: key 'metrics' is missing",
        make(_fitted, lambda f: (f / "run" / "comparison.json").write_text("{}")),
    ),
    (
        "report-coefficient-without-its-estimate",
        "report run",
        2,
        "coefficients[0] has no 'estimate'",
        in_run("models/glm_frequency.json", lambda b: _replace(b, '"estimate"', '"estimat"')),
    ),
    (
        "compare-force-replaces-its-own-works",
        "compare run --force",
        0,
        "pure_premium",
        make(_fitted, lambda f: (f / "run" / "figures").mkdir()),
    ),
    # ---- issue 11: hostile level names in the exhibit (item 2): the table is written, exit 0
    ("tabulate-formula-and-control-levels-work", TABULATE + " --model glm", 0, "wrote newtable", _fitted),
    # ---- issue 11: hand-edited run folders
    (
        "run-json-without-the-book",
        TABULATE,
        2,
        "run/run.json: key 'book.path_from_run' is missing or not a string",
        manifest(lambda d: d["book"].pop("path_from_run")),
    ),
    (
        "run-json-rows-of-wrong-type",
        TABULATE,
        2,
        "run/run.json: key 'rows.total' is missing or not an integer",
        manifest(lambda d: d["rows"].update(total="many")),
    ),
    (
        "run-json-without-cautions",
        "compare run --out cmp",
        2,
        "run/run.json: key 'cautions' is missing or not a list",
        manifest(lambda d: d.pop("cautions")),
    ),
    (
        "run-truncated-predictions",
        TABULATE,
        2,
        "run/predictions.parquet: not a readable Parquet file",
        in_run("predictions.parquet", lambda b: b[: len(b) // 2]),
    ),
    (
        "run-truncated-predictions-compare",
        "compare run --out cmp",
        2,
        "run/predictions.parquet: not a readable Parquet file",
        in_run("predictions.parquet", lambda b: b[: len(b) // 2]),
    ),
    (
        "run-levels-without-labels",
        TABULATE,
        2,
        "run/levels.json: not a levels file written by `fit`",
        in_run("levels.json", lambda b: b'{"age": {"base": "x"}}'),
    ),
    (
        "run-truncated-boosted-model",
        TABULATE + " --model gbm",
        2,
        "run/models/gbm_pure_premium.txt: model text: no 'end of",
        in_run("models/gbm_pure_premium.txt", lambda b: b[: len(b) * 2 // 3]),
    ),
    (
        "run-boosted-model-child-out-of-range",
        TABULATE + " --model gbm",
        2,
        "run/models/gbm_pure_premium.txt: model text:",
        in_run("models/gbm_pure_premium.txt", lambda b: b.replace(b"\nnum_leaves=", b"\nnum_leaves=9", 1)),
    ),
    # ---- issue 11: the model reader (item 4)
    ("model-intact-works", CERTIFY, 0, "trees checked", model()),
    ("model-empty", CERTIFY, 2, "model.txt: model text: no 'feature_names' line", model(cut=0)),
    ("model-truncated-in-a-tree", CERTIFY, 2, "no 'end of trees' line; the file is truncated", model(cut=900)),
    ("model-truncated-in-parameters", CERTIFY, 2, "no 'end of parameters' line; the file is truncated", model(cut=-60)),
    (
        "model-non-numeric-threshold",
        CERTIFY,
        2,
        "tree 0 has a non-numeric 'threshold'",
        model("threshold=0 ", "threshold=x "),
    ),
    ("model-non-numeric-leaves", CERTIFY, 2, "has num_leaves='abc'", model("num_leaves=5", "num_leaves=abc")),
    ("model-30000-leaves", CERTIFY, 2, "tree 0 has num_leaves=30000; 1..", model("num_leaves=5", "num_leaves=30000")),
    (
        "model-leaves-of-many-digits",
        CERTIFY,
        2,
        "a whole number below 10^9",
        model("num_leaves=5", "num_leaves=5" + "0" * 400),
    ),
    (
        "model-child-out-of-range",
        CERTIFY,
        2,
        "tree 0 has a left_child outside the tree",
        model("left_child=1 3", "left_child=1 9"),
    ),
    (
        "model-child-back-to-the-root",
        CERTIFY,
        2,
        "node 0 leads back to a node already reached",
        model("left_child=1 3", "left_child=0 3"),
    ),
    (
        "model-child-reached-twice",
        CERTIFY,
        2,
        "leads back to a node already reached",
        model("right_child=2 -3", "right_child=1 -3"),
    ),
    (
        "model-negative-split-feature",
        CERTIFY,
        2,
        "tree 0 splits on a feature outside 0..1",
        model("split_feature=1 0", "split_feature=1 -1"),
    ),
    (
        "model-split-feature-too-large",
        CERTIFY,
        2,
        "tree 0 splits on a feature outside 0..1",
        model("split_feature=1 0", "split_feature=1 7"),
    ),
    (
        "model-fractional-split-feature",
        CERTIFY,
        2,
        "'split_feature' that is not a whole number",
        model("split_feature=1 0", "split_feature=1 0.5"),
    ),
    (
        "model-categorical-threshold-out-of-range",
        CERTIFY,
        2,
        "categorical threshold outside 0..0",
        model("threshold=0 ", "threshold=3 "),
    ),
    (
        "model-negative-category-word",
        CERTIFY,
        2,
        "cat_boundaries or cat_threshold out of range",
        model("cat_threshold=10", "cat_threshold=-10"),
    ),
    (
        "model-category-bounds-out-of-range",
        CERTIFY,
        2,
        "cat_boundaries or cat_threshold out of range",
        model("cat_boundaries=0 1", "cat_boundaries=0 7"),
    ),
    (
        "model-num-cat-disagrees",
        CERTIFY,
        2,
        "tree 0 has num_cat=2 but 2 cat_boundaries",
        model("num_cat=1", "num_cat=2"),
    ),
    (
        "model-unknown-decision-type",
        CERTIFY,
        2,
        "decision_type outside 0..15",
        model("decision_type=1 2", "decision_type=1 99"),
    ),
    (
        "model-nan-leaf-value",
        CERTIFY,
        2,
        "missing or infinite value in 'leaf_value'",
        model("leaf_value=0.", "leaf_value=nan 0."),
    ),
    (
        "model-leaf-value-missing-one",
        CERTIFY,
        2,
        "arrays that disagree with num_leaves=5",
        model("leaf_value=0.37943515569769182 ", "leaf_value="),
    ),
    (
        "model-leaf-count-missing-one",
        CERTIFY,
        2,
        "arrays that disagree with num_leaves=5",
        model("leaf_count=77 ", "leaf_count="),
    ),
    ("model-without-leaf-values", CERTIFY, 2, "tree 0 lacks 'leaf_value'", model("leaf_value=", "leaf_valu=")),
    (
        "model-tree-sizes-edited",
        CERTIFY,
        2,
        "tree_sizes do not match the tree sections",
        model("tree_sizes=666", "tree_sizes=667"),
    ),
    (
        "model-max-feature-index-edited",
        CERTIFY,
        2,
        "max_feature_idx=4 but 2 feature names",
        model("max_feature_idx=1", "max_feature_idx=4"),
    ),
    (
        "model-several-trees-per-iteration",
        CERTIFY,
        2,
        "several trees per iteration",
        model("num_tree_per_iteration=1", "num_tree_per_iteration=3"),
    ),
    ("model-linear-tree", CERTIFY, 2, "tree 0 is a linear tree", model("is_linear=0", "is_linear=1")),
    ("model-tree-index-not-a-number", CERTIFY, 2, "has Tree='x'", model("Tree=1", "Tree=x")),
    (
        "model-categorical-promise",
        "certify model.txt --factor region --direction increasing",
        2,
        "splits the promised feature as a categorical",
        model(),
    ),
    # ---- issue 11: every read whole or refused (item 3)
    (
        "book-duplicate-column-csv",
        FIT,
        2,
        "book.csv: column 'region' appears twice in the header (columns 7 and 9)",
        _duplicate_header("book.csv"),
    ),
    (
        "book-duplicate-column-validate",
        "validate book.csv --spec spec.toml",
        2,
        "column 'region' appears twice in the header",
        _duplicate_header("book.csv"),
    ),
    (
        "rate-duplicate-column",
        RATE,
        2,
        "policies.csv: column 'region' appears twice in the header",
        _duplicate_header("policies.csv"),
    ),
    (
        "book-duplicate-column-parquet",
        "fit book.parquet --spec spec.toml --out run",
        2,
        "book.parquet: column 'region' appears twice",
        _duplicate_parquet,
    ),
    (
        "book-struct-column",
        "fit book.parquet --spec spec.toml --out run",
        2,
        "book.parquet: column 'extra' is nested (struct<a: int64>)",
        _parquet_with("extra", lambda n: pa.array([{"a": 1}] * n)),
    ),
    (
        "book-list-column-validate",
        "validate book.parquet --spec spec.toml",
        2,
        "book.parquet: column 'extra' is nested (list<",
        _parquet_with("extra", lambda n: pa.array([[1, 2]] * n)),
    ),
    (
        "rate-struct-column",
        "rate table book.parquet --out priced.csv",
        2,
        "book.parquet: column 'extra' is nested",
        _parquet_with("extra", lambda n: pa.array([{"a": 1}] * n)),
    ),
    (
        "book-folder-mixing-formats",
        "fit parts --spec spec.toml --out run",
        2,
        "parts: the folder mixes CSV and Parquet parts (a.csv and b.parquet)",
        _mixed_folder,
    ),
    (
        "rate-folder-mixing-formats",
        "rate table parts --out priced.csv",
        2,
        "the folder mixes CSV and Parquet parts",
        _mixed_folder,
    ),
    (
        "validate-claim-count-1e26",
        "validate book.csv --spec spec.toml",
        1,
        "column 'claim_count': 1 row with a claim count above 1e+06 (check the column) (rows 3)",
        book(
            lambda d: d.astype({"claim_count": object}).assign(
                claim_count=lambda x: x["claim_count"].mask(x.index == 3, "1e26")
            )
        ),
    ),
    (
        "fit-claim-count-2e6",
        FIT,
        2,
        "column 'claim_count': 1 row with a claim count above 1e+06 (check the column) (rows 4)",
        book(lambda d: d.assign(claim_count=d["claim_count"].mask(d.index == 4, 2_000_000))),
    ),
    (
        "validate-absurd-amount",
        "validate book.csv --spec spec.toml",
        1,
        "with a claim amount of 1e+15 or more (check the units)",
        book(
            lambda d: d.assign(claim_amount=d["claim_amount"].mask(d.index == d.index[d["claim_count"] > 0][0], 1e300))
        ),
    ),
    (
        "validate-infinite-amount",
        "validate book.csv --spec spec.toml",
        1,
        "with a missing or non-finite claim amount",
        book(
            lambda d: d.astype({"claim_amount": object}).assign(
                claim_amount=lambda x: x["claim_amount"].mask(x.index == 2, "inf")
            )
        ),
    ),
    # ---- issue 11: limits at the edge (item 5)
    (
        "spec-threads-too-many",
        FIT,
        2,
        "key 'gbm.threads' must be <= 256, got 100000",
        spec("[split]", "[gbm]\nthreads = 100000\n[split]"),
    ),
    (
        "spec-threads-zero",
        FIT,
        2,
        "key 'gbm.threads' must be >= 1, got 0",
        spec("[split]", "[gbm]\nthreads = 0\n[split]"),
    ),
    (
        "spec-relativity-decimals-400",
        FIT,
        2,
        "key 'table.relativity_decimals' must be <= 12, got 400",
        spec("[split]", "[table]\nrelativity_decimals = 400\n[split]"),
    ),
    (
        "spec-premium-decimals-13",
        FIT,
        2,
        "key 'table.premium_decimals' must be <= 12, got 13",
        spec("[split]", "[table]\npremium_decimals = 13\n[split]"),
    ),
    (
        "spec-seed-above-lightgbms",
        FIT,
        2,
        "key 'split.seed' must be <= 2147483647, got 2147483648",
        spec("seed = 7", "seed = 2147483648"),
    ),
    (
        "spec-seed-of-300-digits",
        FIT,
        2,
        "key 'split.seed' must be <= 2147483647, got 1000000000",
        spec("seed = 7", "seed = 1" + "0" * 300),
    ),
    (
        "spec-seed-of-5000-digits",
        FIT,
        2,
        "spec.toml: a number cannot be read (Exceeds the limit",
        spec("seed = 7", "seed = 1" + "0" * 5000),
    ),
    (
        "spec-integer-beyond-int64",
        FIT,
        2,
        "key 'table.max_bands' must be <= 9223372036854775807",
        spec("[split]", "[table]\nmax_bands = " + str(2**70) + "\n[split]"),
    ),
    ("spec-nested-40-deep", FIT, 2, "spec.toml: TOML nested too deeply (at most 32 levels)", _deep_spec(40)),
    ("spec-nested-5000-deep", FIT, 2, "spec.toml: TOML nested too deeply (at most 32 levels)", _deep_spec(5000)),
    (
        "spec-bare-date",
        FIT,
        2,
        "key 'table.effective_date' is a bare TOML date or time (2027-01-01)",
        spec("[split]", "[table]\neffective_date = 2027-01-01\n[split]"),
    ),
    (
        "spec-date-for-a-string",
        FIT,
        2,
        "key 'table.table_id' is a bare TOML date or time",
        spec("[split]", "[table]\ntable_id = 2027-01-01\n[split]"),
    ),
    (
        "spec-date-time-for-a-column",
        FIT,
        2,
        "key 'columns.exposure' is a bare TOML date or time",
        spec('exposure = "exposure"', "exposure = 1979-05-27T07:32:00Z"),
    ),
    (
        "spec-time-in-a-list",
        FIT,
        2,
        "key 'factors.age.bands[1]' is a bare TOML date or time",
        spec("bands = [25, 40, 60]", "bands = [25, 07:32:00, 60]"),
    ),
    (
        "simulate-policies-too-many",
        "simulate scenario.toml --out sim.csv --policies 100000000000000",
        2,
        "--policies must be an integer from 1 to 50,000,000, got 100000000000000",
        _scenario(),
    ),
    (
        "simulate-seed-too-large",
        "simulate scenario.toml --out sim.csv --policies 10 --seed " + "9" * 100,
        2,
        "--seed must be an integer from 0 to",
        _scenario(),
    ),
    (
        "scenario-policies-too-many",
        "simulate scenario.toml --out sim.csv",
        2,
        "key 'scenario.policies' must be <= 50000000",
        _scenario(lambda t: t.replace("policies = ", "policies = 9000000000 # ", 1)),
    ),
]
IDS = [c[0] for c in CASES]


# ------------------------------------------------------------------------------------------ running


def _snapshot(folder: Path) -> dict[str, str]:
    """Every entry under `folder` (hidden ones too): sha256 of files, link targets, '<dir>' for folders."""
    out = {}
    for path in sorted(folder.rglob("*")):
        key = str(path.relative_to(folder))
        if path.is_symlink():
            out[key] = "-> " + os.readlink(path)
        elif path.is_dir():
            out[key] = "<dir>"
        else:
            out[key] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


@pytest.fixture(scope="module")
def outcomes(tmp_path_factory) -> dict:
    """Prepare every case's folder, then run the cases two at a time; (result, before, after) by id."""
    base = tmp_path_factory.mktemp("battery")
    folders = {}
    for case_id, _, _, _, prepare in CASES:
        folder = base / case_id
        folder.mkdir()
        _write_defaults(folder)
        if prepare is not None:
            prepare(folder)
        folders[case_id] = folder

    def run(case: tuple) -> tuple:
        folder = folders[case[0]]
        before = _snapshot(folder)
        result = run_cli(*case[1].split(), cwd=folder, timeout=120)
        return result, before, _snapshot(folder)

    with ThreadPoolExecutor(max_workers=2) as pool:
        return dict(zip(IDS, pool.map(run, CASES)))


def test_the_battery_has_at_least_40_cases():
    assert len(CASES) >= 40 and len(set(IDS)) == len(IDS)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_bad_input_gets_one_clear_answer(outcomes, case):
    case_id, command, code, fragment, _ = case
    result, before, after = outcomes[case_id]
    where = f"{command}\nstdout: {result.stdout[-1500:]}\nstderr: {result.stderr[-1500:]}"
    assert result.returncode == code, where
    assert "Traceback" not in result.stderr + result.stdout, where
    if code == 2:
        lines = result.stderr.splitlines()
        assert len(lines) == 1 and fragment in lines[0], where
        assert lines[0].startswith("premiumlab: "), where
    else:
        assert fragment in result.stdout, where
    if code == 0:
        assert {k: v for k, v in after.items() if k in before} == before, "an input changed"
        assert not [k for k in after if k.startswith(".") or "/." in k], "a temporary file was left"
    else:
        assert after == before, "the folder changed: something was written, left behind or modified"
