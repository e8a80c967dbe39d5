"""Scenario simulator: an invented portfolio described in TOML -> a synthetic book and `truth.json`.

The data are invented (fictional insurers, fictional regions). They exist for the demo and for tests
that recover known effects; any table built on them is a draft for a qualified actuary and, for real
use, must be filed and approved under local rate regulation.

The scenario file and its keys: `scenario_file`; the typed scenario: `scenario`; how the book is
drawn: `draw`; what truth.json holds: `truth`. This module draws the book in order, prices it with
the current tariff and writes the files.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import write_json
from premiumlab._core.toml_schema import INTEGER_LIMIT
from premiumlab.simulation.draw import (
    Effects,
    Rows,
    claim_amounts,
    draw_factors,
    draw_missing,
    exposure_rows,
    true_effects,
)
from premiumlab.simulation.scenario import PREMIUM_COLUMN, Factor, Scenario
from premiumlab.simulation.scenario_file import MAX_POLICIES, load_scenario
from premiumlab.simulation.truth import TRUTH_FILE, expected_totals, factor_truths, truth_document


@dataclass(frozen=True)
class SimulatedBook:
    """A simulated book, its truth (the content of truth.json), the number of large claims and the
    rows' true effects (not written anywhere; for recovery checks, `premiumlab.simulation.recovery`)."""

    book: pd.DataFrame
    truth: dict
    large_claims: int
    effects: Effects


def _current_premium(
    scenario: Scenario, rows: Rows, factors: dict[str, dict], expected_amount: float
) -> tuple[np.ndarray, dict]:
    """Current premium per row (cents, at least 0.01) and the tariff's description for truth.json."""
    relativity = np.ones(len(rows.exposure))
    described: dict[str, Any] = {}
    for name, k in scenario.tariff_shrink.items():
        f = scenario.factor(name)
        true_pp = factors[name]["relativities"]["pure_premium"]
        table = np.array([true_pp[label] for label in f.labels]) ** k
        row_relativity = table[f.label_codes(rows.values[name])]
        described[name] = {"shrink": k, "relativities": dict(zip(f.labels, table))}
        if name in rows.missing:
            missing_relativity = factors[name]["missing"]["relativities"]["pure_premium"] ** k
            row_relativity[rows.missing[name]] = missing_relativity
            described[name]["missing"] = missing_relativity
        relativity *= row_relativity
    base_rate = expected_amount / (scenario.expected_loss_ratio * float(np.sum(rows.exposure * relativity)))
    premium = np.maximum(np.round(base_rate * relativity * rows.exposure, 2), 0.01)
    return premium, {"expected_loss_ratio": scenario.expected_loss_ratio, "base_rate": base_rate, "factors": described}


def _policy_ids(n: int) -> np.ndarray:
    """'P0000001', 'P0000002', ... (at least seven digits)."""
    width = max(7, len(str(n)))
    return np.char.add("P", np.char.zfill(np.arange(1, n + 1).astype(str), width))


def _book_column(
    f: Factor, values: np.ndarray, missing: np.ndarray | None
) -> np.ndarray | pd.api.extensions.ExtensionArray:
    """A factor's column: level names, or numbers (integers when `round_to` is whole); missing
    values are None (categorical), NaN (float) or <NA> (nullable integers)."""
    if not f.numeric:
        column = np.asarray(f.labels, dtype=object)[values]
        if missing is not None:
            column[missing] = None
        return column
    if not f.writes_integers:
        return values if missing is None else np.where(missing, np.nan, values)
    integers = values.astype(np.int64)
    return integers if missing is None else pd.arrays.IntegerArray(integers, missing)


def _checked_override(value: Any, name: str, low: int, high: int) -> int:
    """A caller's `policies` or `seed`: an integer from `low` to `high`."""
    if not isinstance(value, int) or isinstance(value, bool) or not low <= value <= high:
        shown = repr(value) if len(repr(value)) <= 40 else f"{repr(value)[:37]}..."
        raise InputError(f"{name} must be an integer from {low} to {high:,}, got {shown}")
    return value


def generate(scenario: Scenario, policies: int | None = None, seed: int | None = None) -> SimulatedBook:
    """Draw the book of a scenario with its truth.

    Parameters
    ----------
    scenario : Scenario
        The scenario.
    policies : int, optional
        Policies to draw (>= 1); the scenario's `policies` when None.
    seed : int, optional
        Seed of numpy's `default_rng` (>= 0); the scenario's `seed` when None.

    Returns
    -------
    SimulatedBook
        The book (one row per policy and period), the content of truth.json and the number of
        large claims.
    """
    n = scenario.policies if policies is None else _checked_override(policies, "--policies", 1, MAX_POLICIES)
    s = scenario.seed if seed is None else _checked_override(seed, "--seed", 0, INTEGER_LIMIT)
    rng = np.random.default_rng(s)
    policy, period, exposure = exposure_rows(
        rng, n, len(scenario.periods), scenario.new_business_share, scenario.lapse_share
    )
    raw = draw_factors(rng, scenario.factors, n)
    missing = {name: lost[policy] for name, lost in draw_missing(s, scenario.factors, raw).items()}
    values = {f.name: f.value(raw[f.name][policy], period) for f in scenario.factors}
    rows = Rows(policy, period, exposure, values, missing)
    effects = true_effects(scenario, rows.values, rows.missing)
    counts = rng.poisson(exposure * effects.frequency)
    amounts, large_claims = claim_amounts(rng, scenario, counts, effects.severity_relativity)

    factors, at_base = factor_truths(scenario, rows, effects)
    expected_claims, expected_amount = expected_totals(scenario, rows, effects)
    premium, tariff = _current_premium(scenario, rows, factors, expected_amount)

    book = pd.DataFrame(
        {
            "policy_id": _policy_ids(n)[policy],
            "year": np.asarray(scenario.periods, dtype=np.int64)[period],
            "exposure": exposure,
            "claim_count": counts.astype(np.int64),
            "claim_amount": amounts,
        }
    )
    for f in scenario.factors:
        book[f.name] = _book_column(f, rows.values[f.name], rows.missing.get(f.name))
    book[PREMIUM_COLUMN] = premium
    truth = truth_document(scenario, n, s, rows, effects, factors, at_base, expected_claims, expected_amount, tariff)
    return SimulatedBook(book, truth, large_claims, effects)


def _book_format(path: Path) -> str:
    """The book's format by its extension: "csv" or "parquet"."""
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return "csv"
    if suffix in (".parquet", ".pq"):
        return "parquet"
    raise InputError(f"{path}: the book must end in .csv or .parquet")


def simulate(
    scenario_path: str | Path, out_path: str | Path, policies: int | None = None, seed: int | None = None
) -> dict:
    """Simulate the scenario's book into a file and write `truth.json` beside it (both replaced if
    present).

    Parameters
    ----------
    scenario_path : str or Path
        The scenario TOML file.
    out_path : str or Path
        The book, CSV or Parquet by its extension.
    policies, seed : int, optional
        Overrides of the scenario's policies and seed.

    Returns
    -------
    dict
        A summary: paths, policies, rows, claims, large claims, exposure (policy-years) and total
        claim amount (currency).
    """
    scenario = load_scenario(scenario_path)
    out = Path(out_path)
    fmt = _book_format(out)
    truth_path = out.with_name(TRUTH_FILE)
    if out.name == TRUTH_FILE:
        raise InputError(f"{out}: the book cannot be named {TRUTH_FILE}")
    if not out.parent.is_dir():
        raise InputError(f"{out}: the folder {out.parent} does not exist")
    result = generate(scenario, policies, seed)
    if fmt == "csv":
        result.book.to_csv(out, index=False, lineterminator="\n")
    else:
        result.book.to_parquet(out, index=False)
    write_json(truth_path, result.truth)
    book = result.book
    return {
        "book": str(out),
        "truth": str(truth_path),
        "policies": result.truth["policies"],
        "rows": len(book),
        "claims": int(book["claim_count"].sum()),
        "large_claims": result.large_claims,
        "exposure": float(book["exposure"].sum()),
        "claim_amount": float(book["claim_amount"].sum()),
    }
