"""Drawing the book of a scenario: who is in force when, factor values, true effects and claims.

Pure functions of the scenario and numpy's random generator, in the order `simulator.generate`
calls them (the order of the draws fixes the book for a seed).

Model
-----
Each policy is in force over part of a window of consecutive periods of 365 days. It gives one row
per period it touches, with earned exposure = days in force in that period / 365, in (0, 1]. For a
row with factor values x, the claim count is Poisson with mean

    exposure x base_frequency x prod_j freq_j(x_j) x I_freq(x)

and every claim, independently, is attritional (Gamma, shape `severity_shape`, mean
base_severity x prod_j sev_j(x_j) x I_sev(x)) or, with probability `large_losses.probability`, large
(a Pareto or lognormal draw times the same severity relativity prod_j sev_j(x_j) x I_sev(x)), so the
severity relativities hold for the whole claim. `freq_j`, `sev_j` are the factor's true
relativities (numeric: exp of a piecewise-linear log-relativity curve; categorical: one per
level) and `I` the interaction multiplier (1 outside its region). On a row whose value of factor j is
missing, freq_j and sev_j are the missing value's relativities instead; the interaction still acts
on the true value. `claim_amount` is the row's sum of claims rounded to cents (at least 0.01 when it
has claims).

Missing values are drawn from side streams of the seed (`scenario.side_stream`), never from the
book's generator, so the main draws are those of a scenario without them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from premiumlab.simulation.scenario import MISSING_STREAM, Factor, Scenario, side_stream

DAYS_PER_PERIOD = 365


@dataclass(frozen=True)
class Rows:
    """The rows of the book before claims: who, when, how much exposure, which factor values (true
    values, also where the book shows them missing), and per factor with missing values the rows
    where it is missing."""

    policy: np.ndarray
    period: np.ndarray
    exposure: np.ndarray
    values: dict[str, np.ndarray]
    missing: dict[str, np.ndarray] = field(default_factory=dict)


@dataclass(frozen=True)
class Effects:
    """True per-row effects: log-relativities per factor, interaction multipliers, frequency and
    the severity relativity (attritional mean = base_severity x severity_relativity)."""

    log_frequency: dict[str, np.ndarray]
    log_severity: dict[str, np.ndarray]
    interaction_frequency: np.ndarray
    interaction_severity: np.ndarray
    frequency: np.ndarray
    severity_relativity: np.ndarray


def exposure_rows(
    rng: np.random.Generator, n: int, periods: int, new_business: float, lapse: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every row of the book: a policy is in force on days [start, end) of the window of
    `periods` x 365 days and gives one row per period it touches.

    Parameters
    ----------
    rng : numpy.random.Generator
        The book's generator (draws start and end days).
    n : int
        Policies.
    periods : int
        Periods in the window.
    new_business, lapse : float
        Shares of policies that start late and that end early, in [0, 1].

    Returns
    -------
    tuple of numpy.ndarray
        (policy index, period index, earned exposure in policy-years, in (0, 1]) per row, ordered
        by policy then period.
    """
    days = DAYS_PER_PERIOD * periods
    starts_late = rng.random(n) < new_business
    start = np.where(starts_late, rng.integers(0, days, n), 0)
    ends_early = rng.random(n) < lapse
    early_end = start + 1 + np.floor(rng.random(n) * (days - start)).astype(np.int64)
    end = np.where(ends_early, early_end, days)
    period_start = DAYS_PER_PERIOD * np.arange(periods)
    in_force = (
        np.minimum(end[:, None], period_start + DAYS_PER_PERIOD) - np.maximum(start[:, None], period_start)
    ).clip(0, DAYS_PER_PERIOD)
    policy, period = np.nonzero(in_force)
    return policy, period, in_force[policy, period] / DAYS_PER_PERIOD


def draw_factors(rng: np.random.Generator, factors: tuple[Factor, ...], n: int) -> dict[str, np.ndarray]:
    """Policy-level raw draws, factor by factor in scenario order; a dependent factor is drawn group
    by group of its parent's first-period label.

    Parameters
    ----------
    rng : numpy.random.Generator
        The book's generator.
    factors : tuple of Factor
        The scenario's factors.
    n : int
        Policies.

    Returns
    -------
    dict of str to numpy.ndarray
        Per factor, n numeric values (before step, clip and rounding) or level codes.
    """
    raw: dict[str, np.ndarray] = {}
    by_name = {f.name: f for f in factors}
    for f in factors:
        if not f.when or f.depends_on is None:
            raw[f.name] = f.distribution.draw(rng, n)
            continue
        parent = by_name[f.depends_on]
        parent_label = parent.label_codes(parent.value(raw[parent.name], 0))
        groups = {parent.labels.index(label): d for label, d in f.when.items()}
        out = np.empty(n, dtype=np.int64 if not f.numeric else float)
        rest = ~np.isin(parent_label, list(groups))
        out[rest] = f.distribution.draw(rng, int(rest.sum()))
        for code, distribution in groups.items():
            members = parent_label == code
            out[members] = distribution.draw(rng, int(members.sum()))
        raw[f.name] = out
    return raw


def draw_missing(seed: int, factors: tuple[Factor, ...], raw: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Which policies lose the value of each factor with `missing`, each factor from its own stream.

    Parameters
    ----------
    seed : int
        The book's seed.
    factors : tuple of Factor
        The scenario's factors.
    raw : dict of str to numpy.ndarray
        Per factor, the policies' raw draws (`draw_factors`).

    Returns
    -------
    dict of str to numpy.ndarray
        Per factor with `missing`, a boolean per policy: missing with probability `share`, or the
        group's share for a policy whose `more_often_when` factor has that level or band in the
        first period.
    """
    out: dict[str, np.ndarray] = {}
    by_name = {f.name: f for f in factors}
    for index, f in enumerate(factors):
        m = f.missing
        if m is None:
            continue
        n = len(raw[f.name])
        probability = np.full(n, m.share)
        if m.group_factor is not None and m.group_label is not None:
            g = by_name[m.group_factor]
            in_group = g.label_codes(g.value(raw[g.name], 0)) == g.labels.index(m.group_label)
            probability[in_group] = m.group_share
        out[f.name] = side_stream(seed, MISSING_STREAM, index).random(n) < probability
    return out


def true_effects(
    scenario: Scenario, values: dict[str, np.ndarray], missing: dict[str, np.ndarray] | None = None
) -> Effects:
    """The true effects of every row (no random draw).

    Parameters
    ----------
    scenario : Scenario
        The scenario.
    values : dict of str to numpy.ndarray
        Per factor, the rows' true values (numeric) or level codes.
    missing : dict of str to numpy.ndarray, optional
        Per factor with missing values, the rows where it is missing: its effect there is the
        missing value's relativity.

    Returns
    -------
    Effects
        Log-relativities per factor, interaction multipliers, frequency (claims per policy-year)
        and severity relativity per row.
    """
    n = len(next(iter(values.values())))
    log_f = {f.name: f.log_effect(values[f.name], "frequency") for f in scenario.factors}
    log_s = {f.name: f.log_effect(values[f.name], "severity") for f in scenario.factors}
    for f in scenario.factors:
        rows = (missing or {}).get(f.name)
        if f.missing is not None and rows is not None:
            log_f[f.name] = np.where(rows, math.log(f.missing.frequency_relativity), log_f[f.name])
            log_s[f.name] = np.where(rows, math.log(f.missing.severity_relativity), log_s[f.name])
    inter_f, inter_s = np.ones(n), np.ones(n)
    ia = scenario.interaction
    if ia is not None:
        inside = np.logical_and.reduce(
            [scenario.factor(name).in_region(values[name], ia.region[name]) for name in ia.factors]
        )
        inter_f[inside], inter_s[inside] = ia.frequency, ia.severity
    frequency = scenario.base_frequency * np.exp(sum(log_f.values())) * inter_f
    return Effects(log_f, log_s, inter_f, inter_s, frequency, np.exp(sum(log_s.values())) * inter_s)


def claim_amounts(
    rng: np.random.Generator, scenario: Scenario, counts: np.ndarray, severity_relativity: np.ndarray
) -> tuple[np.ndarray, int]:
    """The claims of every row, all drawn at once and summed per row.

    Parameters
    ----------
    rng : numpy.random.Generator
        The book's generator.
    scenario : Scenario
        The scenario (severity shape, base severity, large losses).
    counts : numpy.ndarray
        Claim count per row.
    severity_relativity : numpy.ndarray
        True severity relativity per row (applies to attritional and large claims).

    Returns
    -------
    tuple of (numpy.ndarray, int)
        The claim amount per row (currency, rounded to cents, at least 0.01 on a row with claims)
        and the number of large claims.
    """
    row = np.repeat(np.arange(len(counts)), counts)
    relativity = severity_relativity[row]
    shape = scenario.severity_shape
    amount = rng.gamma(shape, scenario.base_severity * relativity / shape)
    large_claims = 0
    if scenario.large_losses is not None:
        is_large = rng.random(len(row)) < scenario.large_losses.probability
        large_claims = int(is_large.sum())
        amount[is_large] = scenario.large_losses.draw(rng, large_claims) * relativity[is_large]
    total = np.bincount(row, weights=amount, minlength=len(counts))
    return np.where(counts > 0, np.maximum(np.round(total, 2), 0.01), 0.0), large_claims
