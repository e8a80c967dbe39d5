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
import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pandas as pd
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
