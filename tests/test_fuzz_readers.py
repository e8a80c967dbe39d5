"""Fuzzing the two readers of hand-editable files (issue 11, item 7): the LightGBM model text
(`premiumlab.models.trees.parser.parse_model`, and the certificate built on it) and the pricing spec
(`premiumlab.book.spec.load_spec`).

Each example takes a valid file and applies one to three random mutations: a line deleted,
doubled, replaced by random text, a number in a line replaced by a random integer, float or word,
bytes overwritten, or the file cut short. The reader must then either accept the file or refuse it
with the project's input error (`InputError`) - never another exception, and never slower than the
per-example deadline (hypothesis's `deadline`; a loop on a cyclic tree or an allocation sized by a
forged count would exceed it). The expectation is the house rule of docs/commands.md: bad input
ends in one clear line.

Example counts: MODEL_EXAMPLES model texts and SPEC_EXAMPLES specs per run (derandomised, so CI
runs the same examples every time).
"""

from __future__ import annotations

import contextlib
import re
import tempfile
from datetime import timedelta
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from premiumlab._core.errors import InputError
from premiumlab.book.spec import load_spec
from premiumlab.models.trees.certificate import certify
from premiumlab.models.trees.parser import parse_model

from _builders import SPEC_TEXT

MODEL_EXAMPLES = 400
SPEC_EXAMPLES = 400
DEADLINE = timedelta(seconds=5)
FUZZ = settings(
    max_examples=MODEL_EXAMPLES,
    deadline=DEADLINE,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
SPEC_FUZZ = settings(FUZZ, max_examples=SPEC_EXAMPLES)
#: A spec using every section with numbers, strings, lists and a date.
FULL_SPEC = (
    SPEC_TEXT
    + """
[gbm]
folds = 3
threads = 2
max_rounds = 100

[table]
table_id = "fuzz"
effective_date = "2027-01-01"
max_bands = 6
relativity_decimals = 3
interactions = [["age", "region"]]

[loadings]
variable_expense = 0.2
profit = 0.05
"""
)
_NUMBER = re.compile(r"-?\d+(\.\d+)?(e[-+]?\d+)?")
_MODEL: list[str] = []


def _model_text() -> str:
    """A small LightGBM Poisson model with numeric and categorical splits, on invented rows (the
    fuzz needs a valid file to damage, not a realistic model)."""
    if not _MODEL:
        rng = np.random.default_rng(5)
        n = 600
        features = pd.DataFrame(
            {"age": rng.integers(18, 80, n).astype(float), "region": pd.Categorical(rng.choice(list("abcde"), n))}
        )
        counts = rng.poisson(np.exp(-1 + 0.02 * features["age"] + 0.8 * features["region"].isin(["b", "d"])))
        params = {"objective": "poisson", "num_leaves": 5, "min_data_in_leaf": 20, "verbose": -1, "seed": 1}
        params |= {"num_threads": 1, "min_data_per_group": 5, "cat_smooth": 1, "max_cat_to_onehot": 1}
        _MODEL.append(lgb.train(params, lgb.Dataset(features, counts), num_boost_round=4).model_to_string())
    return _MODEL[0]


_replacement = st.one_of(
    st.integers(-(2**70), 2**70).map(str),
    st.sampled_from(["0", "-1", "1", "2", "3", "4", "-5", "30000", "nan", "inf", "-inf", "1e308", "0.5", "x", ""]),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
)
_mutation = st.one_of(
    st.tuples(st.just("delete"), st.integers(0, 10_000)),
    st.tuples(st.just("double"), st.integers(0, 10_000)),
    st.tuples(st.just("line"), st.integers(0, 10_000), st.text(max_size=40)),
    st.tuples(st.just("number"), st.integers(0, 10_000), st.integers(0, 20), _replacement),
    st.tuples(st.just("bytes"), st.integers(0, 100_000), st.binary(min_size=1, max_size=8)),
    st.tuples(st.just("cut"), st.integers(0, 100_000)),
)


def _mutate(text: str, mutation: tuple) -> str:
    """`text` with one mutation (module docstring); positions wrap around the text's length."""
    kind, where, *rest = mutation
    lines = text.split("\n")
    at = where % len(lines)
    if kind == "delete":
        del lines[at]
    elif kind == "double":
        lines.insert(at, lines[at])
    elif kind == "line":
        lines[at] = rest[0]
    elif kind == "number":
        numbers = list(_NUMBER.finditer(lines[at]))
        if numbers:
            m = numbers[rest[0] % len(numbers)]
            lines[at] = lines[at][: m.start()] + rest[1] + lines[at][m.end() :]
    elif kind == "bytes":
        data = text.encode()
        at = where % max(len(data), 1)
        return (data[:at] + rest[0] + data[at + len(rest[0]) :]).decode("utf-8", errors="replace")
    elif kind == "cut":
        return text[: where % max(len(text), 1)]
    return "\n".join(lines)


@FUZZ
@given(st.lists(_mutation, min_size=1, max_size=3))
def test_a_mutated_model_text_is_read_or_refused_in_one_line(mutations):
    text = _model_text()
    for mutation in mutations:
        text = _mutate(text, mutation)
    with contextlib.suppress(InputError):
        names, _trees = parse_model(text)
        if names:
            certify(text, 0, 1)


def test_the_unmutated_model_is_read():
    """The fuzz starts from a model the reader accepts, with a categorical split to damage."""
    names, trees = parse_model(_model_text())
    assert names == ["age", "region"] and len(trees) == 4
    assert any(t.cat_boundaries.size for t in trees)


@SPEC_FUZZ
@given(st.lists(_mutation, min_size=1, max_size=3))
def test_a_mutated_spec_is_read_or_refused_in_one_line(mutations):
    text = FULL_SPEC
    for mutation in mutations:
        text = _mutate(text, mutation)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "spec.toml"
        path.write_text(text, encoding="utf-8", errors="surrogatepass")
        with contextlib.suppress(InputError):
            load_spec(path)


def test_the_unmutated_spec_is_read(tmp_path):
    (tmp_path / "spec.toml").write_text(FULL_SPEC)
    spec = load_spec(tmp_path / "spec.toml")
    assert spec.table.effective_date == "2027-01-01" and spec.gbm.num_threads == 2
