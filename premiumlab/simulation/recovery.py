"""How well a fitted model or table recovers a simulated book's known truth.

Two measures, both on log relativities and exposure-weighted over the book's rows:

- **Share of the true variance explained**, per factor: with t the true log relativity of the row
  (the factor's true frequency and severity effects, `log_frequency + log_severity`) and f the
  fitted log relativity of the same factor on the same row, both taken as deviations from their
  exposure-weighted means, the share is ``1 - sum w (t - f)^2 / sum w t^2``. It is 1 for a perfect
  recovery and 0 for a flat factor (every relativity 1); flattening (attenuation) and noise both
  lower it. Unlike a squared correlation it does not forgive a flattened effect.
- **Policy-level error**: the exposure-weighted root mean square of log(fitted / true) pure premium
  per exposure unit, after removing its exposure-weighted mean, so that the overall rate level does
  not count; 0.10 means the fitted premium is typically about 10 % off the true one.

The truth comes from the simulator's draw (`SimulatedBook.effects`), never from the book's claims.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab.simulation.draw import Effects
from premiumlab.simulation.scenario import Scenario


def true_pure_premium(scenario: Scenario, effects: Effects) -> np.ndarray:
    """The true expected pure premium of every row.

    Parameters
    ----------
    scenario : Scenario
        The scenario (its mean severity, large losses included).
    effects : Effects
        The rows' true effects (`SimulatedBook.effects`).

    Returns
    -------
    numpy.ndarray
        Money per exposure unit: frequency (claims per exposure unit) x severity relativity x
        the scenario's mean severity (money per claim), interactions included.
    """
    return effects.frequency * effects.severity_relativity * scenario.mean_severity


def true_log_relativity(effects: Effects, factor: str) -> np.ndarray:
    """The true pure-premium log relativity of one factor on every row (main effect only).

    Parameters
    ----------
    effects : Effects
        The rows' true effects.
    factor : str
        The factor's name.

    Returns
    -------
    numpy.ndarray
        log_frequency + log_severity of the factor (the missing value's relativity on rows where it
        is missing), before centring.
    """
    if factor not in effects.log_frequency:
        raise InputError(f"truth: no factor '{factor}'")
    return effects.log_frequency[factor] + effects.log_severity[factor]


def _centred(values: np.ndarray, weight: np.ndarray) -> np.ndarray:
    return values - np.average(values, weights=weight)


def explained_share(true_log: np.ndarray, fitted_log: np.ndarray, weight: np.ndarray) -> float:
    """Share of the true variance of a factor's log relativity that the fitted one explains.

    Parameters
    ----------
    true_log, fitted_log : numpy.ndarray
        True and fitted log relativities of the factor per row.
    weight : numpy.ndarray
        Exposure per row (exposure units), > 0 in total.

    Returns
    -------
    float
        ``1 - sum w (t - f)^2 / sum w t^2`` with t and f centred on their exposure-weighted means;
        at most 1, negative when the fitted effect is worse than no effect.
    """
    t, f = _centred(true_log, weight), _centred(fitted_log, weight)
    total = float(np.sum(weight * t**2))
    if total <= 0:
        raise InputError("truth: the factor has no true variation to explain")
    return 1.0 - float(np.sum(weight * (t - f) ** 2)) / total


def policy_error(true_premium: np.ndarray, fitted_premium: np.ndarray, weight: np.ndarray) -> float:
    """Exposure-weighted RMS of the centred log ratio of fitted to true pure premium.

    Parameters
    ----------
    true_premium, fitted_premium : numpy.ndarray
        True and fitted pure premium per exposure unit of every row (money), > 0.
    weight : numpy.ndarray
        Exposure per row (exposure units).

    Returns
    -------
    float
        ``sqrt(sum w (r - r_bar)^2 / sum w)`` with r = log(fitted / true) and r_bar its
        exposure-weighted mean (the overall level is not counted).
    """
    if np.any(~(fitted_premium > 0)) or np.any(~(true_premium > 0)):
        raise InputError("recovery: premiums must be finite and > 0")
    r = _centred(np.log(fitted_premium / true_premium), weight)
    return float(np.sqrt(np.sum(weight * r**2) / np.sum(weight)))


def table_recovery(
    scenario: Scenario, effects: Effects, rated: pd.DataFrame, rows: np.ndarray, weight: np.ndarray
) -> tuple[dict[str, float], float]:
    """A rated table's recovery of the truth: per factor the explained share, and the policy error.

    A factor of a two-way table (a, b) is measured on the pair's joint log relativity, the same for
    a and b: fitted, log rel_a + log rel_b + log rel_a__b; true, t_a + t_b plus the scenario's
    interaction (log of its frequency and severity multipliers) when it concerns the same pair.
    The split of a joint effect into mains and cells depends on each side's base levels, so the
    mains alone cannot be compared with the truth's.

    Parameters
    ----------
    scenario : Scenario
        The scenario the book was drawn from.
    effects : Effects
        The book's true effects (all rows).
    rated : pd.DataFrame
        `rating_tables.rate` of the table on the book's `rows`, in that order: its `rel_NAME`
        columns (main effects), `rel_A__B` (two-way tables) and `pure_premium` (money per row).
    rows : numpy.ndarray
        Positions of the rated rows in the book.
    weight : numpy.ndarray
        Exposure of the rated rows (exposure units).

    Returns
    -------
    tuple of (dict, float)
        `explained_share` of every scenario factor (NaN for one the table does not rate), and
        `policy_error` of pure_premium / exposure against `true_pure_premium`.
    """
    true = {f.name: true_log_relativity(effects, f.name)[rows] for f in scenario.factors}
    fitted = {name: np.log(rated[f"rel_{name}"].to_numpy(dtype=float)) for name in true if f"rel_{name}" in rated}
    shares = {
        name: explained_share(true[name], fitted[name], weight) if name in fitted else float("nan") for name in true
    }
    interacting = set(scenario.interaction.factors) if scenario.interaction is not None else set()
    for column in (c for c in rated.columns if c.startswith("rel_") and "__" in c):
        a, b = column[len("rel_") :].split("__")
        joint_true = true[a] + true[b]
        if {a, b} == interacting:
            joint_true = joint_true + np.log(effects.interaction_frequency * effects.interaction_severity)[rows]
        joint_fitted = fitted[a] + fitted[b] + np.log(rated[column].to_numpy(dtype=float))
        shares[a] = shares[b] = explained_share(joint_true, joint_fitted, weight)
    premium = rated["pure_premium"].to_numpy(dtype=float) / weight
    return shares, policy_error(true_pure_premium(scenario, effects)[rows], premium, weight)
