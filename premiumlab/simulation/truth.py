"""truth.json: the true effects behind a simulated book, averaged over its bands and levels.

Per factor: `relativities` {frequency, severity, pure_premium} per level or band, normalised so the
`base` level/band is 1 (`base_rule` says why it is the base), and `exposure` per level/band. For a
numeric factor the band values average the true curve over the simulated rows in the band:
frequency weighted by exposure, severity by exposure x true frequency (the expected claim count,
interaction included), pure premium = exposure-weighted mean of freq_j x sev_j; `curve` gives the
true relativities on a grid of 101 points from the smallest to the largest value (same
normalisation). Empty bands are null. Main effects exclude the interaction; `interaction.cells`
lists, per band/level pair with exposure, the mean interaction multiplier (weighted as above; 1 =
no interaction). `base` gives frequency, severity and pure premium at the base of every factor
(outside the interaction), `scenario_base` where every effect is 1, `large_losses` the expected
share of claim amounts from large losses.

A factor with missing values has a `missing` entry: its scenario keys (`share`, `more_often_when`,
`frequency_relativity`, `severity_relativity`), the exposure, policies and shares missing, and the
missing group's `relativities` averaged and normalised as a level's; its levels and bands hold only
the rows where the value is shown (the interaction cells use the true values). A factor with
generated levels has a `generated` entry: its `generate` keys, and per level its probability and its
frequency and severity relativities on the scenario's scale (sum_k p_k r_k = 1), also for levels
without exposure in the book.
"""

from __future__ import annotations

import math
from dataclasses import asdict
from typing import Any

import numpy as np

from premiumlab.simulation.draw import Effects, Rows
from premiumlab.simulation.scenario import Factor, Missing, Scenario

GRID_POINTS = 101
TRUTH_FILE = "truth.json"
CAUTION = (
    "Invented data from a fictional scenario, for demonstration and testing only. Any rating "
    "table built from it is a draft for review by a qualified actuary and, for real use, must "
    "be filed and approved under local rate regulation."
)


def _weighted_means(codes: np.ndarray, k: int, weights: np.ndarray, values: np.ndarray) -> np.ndarray:
    """sum(weights x values) / sum(weights) per code 0..k-1 (NaN where the weight is 0)."""
    w = np.bincount(codes, weights=weights, minlength=k)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.bincount(codes, weights=weights * values, minlength=k) / w


def _factor_truth(f: Factor, rows: Rows, effects: Effects) -> tuple[dict, dict[str, float]]:
    """The factor's entry of truth.json, and its unnormalised band/level averages at its base."""
    values, exposure, missing = rows.values[f.name], rows.exposure, rows.missing.get(f.name)
    codes = f.label_codes(values)
    k = len(f.labels)
    if missing is not None:
        codes = np.where(missing, k, codes)  # the missing group is group k, after the labels
    groups = k if missing is None else k + 1
    fr, sr = np.exp(effects.log_frequency[f.name]), np.exp(effects.log_severity[f.name])
    expected_claims = exposure * effects.frequency
    raw = {
        "frequency": _weighted_means(codes, groups, exposure, fr),
        "severity": _weighted_means(codes, groups, expected_claims, sr),
        "pure_premium": _weighted_means(codes, groups, exposure, fr * sr),
    }
    label_exposure = np.bincount(codes, weights=exposure, minlength=groups)
    base = f.base if f.base is not None else f.labels[int(np.argmax(label_exposure[:k]))]
    b = f.labels.index(base)
    out: dict[str, Any] = {
        "type": f.type,
        "base": base,
        "base_rule": "scenario" if f.base is not None else "largest exposure",
        "relativities": {t: dict(zip(f.labels, v / v[b])) for t, v in raw.items()},
        "exposure": dict(zip(f.labels, label_exposure)),
    }
    if f.numeric:
        out["bands"] = list(f.bands)
        grid = np.linspace(values.min(), values.max(), GRID_POINTS)
        gf, gs = np.exp(f.log_effect(grid, "frequency")), np.exp(f.log_effect(grid, "severity"))
        out["curve"] = {
            "x": grid,
            "frequency": gf / raw["frequency"][b],
            "severity": gs / raw["severity"][b],
            "pure_premium": gf * gs / raw["pure_premium"][b],
        }
    else:
        out["levels"] = list(f.labels)
    if f.generated is not None:
        out["generated"] = {
            **asdict(f.generated),
            "probabilities": dict(zip(f.labels, f.distribution.parameters["probabilities"])),
            "frequency_relativity": dict(zip(f.labels, f.level_relativities("frequency"))),
            "severity_relativity": dict(zip(f.labels, f.level_relativities("severity"))),
        }
    if missing is not None and f.missing is not None:
        normalised = {t: v[k] / v[b] for t, v in raw.items()}
        out["missing"] = _missing_truth(f.missing, rows.policy, missing, label_exposure, normalised)
    return out, {t: float(v[b]) for t, v in raw.items()}


def _missing_truth(
    m: Missing, policy: np.ndarray, missing: np.ndarray, group_exposure: np.ndarray, relativities: dict
) -> dict:
    """truth.json's `missing` of a factor: its keys, what is missing in the book (`missing` per row,
    `group_exposure` per group, the missing group last), and the missing group's relativities."""
    policies = int(policy.max()) + 1  # every policy has at least one row
    missing_policies = len(np.unique(policy[missing]))
    exposure = float(group_exposure[-1])
    return {
        "share": m.share,
        "more_often_when": None
        if m.group_factor is None
        else {"factor": m.group_factor, "level": m.group_label, "share": m.group_share},
        "frequency_relativity": m.frequency_relativity,
        "severity_relativity": m.severity_relativity,
        "policies": missing_policies,
        "share_of_policies": missing_policies / policies,
        "exposure": exposure,
        "share_of_exposure": exposure / float(group_exposure.sum()),
        "relativities": relativities,
    }


def _interaction_truth(scenario: Scenario, rows: Rows, effects: Effects) -> dict | None:
    """truth.json's `interaction`: per band/level pair with exposure, the mean interaction multipliers."""
    ia = scenario.interaction
    if ia is None:
        return None
    a, b = (scenario.factor(name) for name in ia.factors)
    ka, kb = len(a.labels), len(b.labels)
    cell = a.label_codes(rows.values[a.name]) * kb + b.label_codes(rows.values[b.name])
    e = rows.exposure
    exposure = np.bincount(cell, weights=e, minlength=ka * kb)
    freq = _weighted_means(cell, ka * kb, e, effects.interaction_frequency)
    sev = _weighted_means(cell, ka * kb, e * effects.frequency, effects.interaction_severity)
    pp = _weighted_means(cell, ka * kb, e, effects.interaction_frequency * effects.interaction_severity)
    cells = [
        {
            a.name: a.labels[c // kb],
            b.name: b.labels[c % kb],
            "exposure": exposure[c],
            "frequency": freq[c],
            "severity": sev[c],
            "pure_premium": pp[c],
        }
        for c in np.flatnonzero(exposure > 0)
    ]
    region = {
        name: list(bounds) if scenario.factor(name).numeric else [scenario.factor(name).labels[i] for i in bounds]
        for name, bounds in ia.region.items()
    }
    return {
        "factors": list(ia.factors),
        "region": region,
        "frequency": ia.frequency,
        "severity": ia.severity,
        "cells": cells,
    }


def factor_truths(scenario: Scenario, rows: Rows, effects: Effects) -> tuple[dict[str, dict], dict[str, float]]:
    """The factors' entries of truth.json.

    Parameters
    ----------
    scenario : Scenario
        The scenario.
    rows : Rows
        The book's rows (exposure, factor values).
    effects : Effects
        The rows' true effects.

    Returns
    -------
    tuple of (dict, dict)
        Per factor its truth.json entry, and per target (frequency, severity, pure_premium) the
        product over factors of their unnormalised band/level averages at the base.
    """
    per_factor = {f.name: _factor_truth(f, rows, effects) for f in scenario.factors}
    factors = {name: entry for name, (entry, _) in per_factor.items()}
    at_base = {t: math.prod(at[t] for _, at in per_factor.values()) for t in ("frequency", "severity", "pure_premium")}
    return factors, at_base


def expected_totals(scenario: Scenario, rows: Rows, effects: Effects) -> tuple[float, float]:
    """The book's expected claims.

    Parameters
    ----------
    scenario : Scenario
        The scenario (its mean severity).
    rows : Rows
        The book's rows.
    effects : Effects
        The rows' true effects.

    Returns
    -------
    tuple of float
        Expected claim count, sum(exposure x frequency), and expected claim amount,
        sum(exposure x frequency x severity relativity) x mean severity (currency).
    """
    expected_claims = float(np.sum(rows.exposure * effects.frequency))
    expected_amount = (
        float(np.sum(rows.exposure * effects.frequency * effects.severity_relativity)) * scenario.mean_severity
    )
    return expected_claims, expected_amount


def truth_document(
    scenario: Scenario,
    n: int,
    seed: int,
    rows: Rows,
    effects: Effects,
    factors: dict[str, dict],
    at_base: dict[str, float],
    expected_claims: float,
    expected_amount: float,
    tariff: dict,
) -> dict:
    """The content of truth.json (see the module docstring).

    Parameters
    ----------
    scenario : Scenario
        The scenario.
    n, seed : int
        Policies drawn and the generator's seed.
    rows : Rows
        The book's rows.
    effects : Effects
        The rows' true effects.
    factors, at_base : dict
        As returned by `factor_truths`.
    expected_claims, expected_amount : float
        As returned by `expected_totals`.
    tariff : dict
        The current tariff's description.

    Returns
    -------
    dict
        The JSON-able truth document.
    """
    mean_severity = scenario.mean_severity
    ll = scenario.large_losses
    large = (
        {"probability": 0.0, "share_of_amounts": 0.0}
        if ll is None
        else {
            "probability": ll.probability,
            "distribution": ll.distribution,
            **ll.parameters,
            "mean": ll.mean,
            "share_of_amounts": ll.probability * ll.mean / mean_severity,
        }
    )
    exposure = float(rows.exposure.sum())
    return {
        "format": "premiumlab.simulation-truth",
        "version": 1,
        "scenario": scenario.name,
        "description": scenario.description,
        "caution": CAUTION,
        "seed": seed,
        "policies": n,
        "rows": len(rows.exposure),
        "periods": list(scenario.periods),
        "units": {
            "frequency": "claims per policy-year",
            "severity": "currency per claim",
            "pure_premium": "currency per policy-year",
        },
        "scenario_base": {
            "frequency": scenario.base_frequency,
            "attritional_severity": scenario.base_severity,
            "severity": mean_severity,
            "pure_premium": scenario.base_frequency * mean_severity,
        },
        "base": {
            "frequency": scenario.base_frequency * at_base["frequency"],
            "attritional_severity": scenario.base_severity * at_base["severity"],
            "severity": mean_severity * at_base["severity"],
            "pure_premium": scenario.base_frequency * mean_severity * at_base["pure_premium"],
        },
        "book": {
            "exposure": exposure,
            "expected_claims": expected_claims,
            "expected_frequency": expected_claims / exposure,
            "expected_amount": expected_amount,
            "expected_pure_premium": expected_amount / exposure,
        },
        "large_losses": large,
        "factors": factors,
        "interaction": _interaction_truth(scenario, rows, effects),
        "current_tariff": tariff,
    }
