"""Diagnostics of figures (`premiumlab._core.diagnostics`): holdout metrics worse than the null model
or absurd, and relativities beyond the plausibility bounds (`compare` for the GLMs; `audit` checks a
table's bounds with the same `check_bounds`)."""

from __future__ import annotations

import math
from collections.abc import Mapping

from premiumlab._core.defaults import PLAUSIBLE_RELATIVITY
from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.errors import InputError

#: A holdout mean deviance this many times the null model's is not a model but a failure.
ABSURD_DEVIANCE_RATIO = 1e6
#: A D^2 below this means a deviance more than twice the holdout mean's: not a figure to compare.
ABSURD_D2 = -1.0


def check_bounds(bounds: tuple[float, float], option: str = "--bounds") -> tuple[float, float]:
    """Plausibility bounds as given by the user, checked.

    Parameters
    ----------
    bounds : (float, float)
        Least and greatest plausible relativity.
    option : str
        The option's name, for the message.

    Returns
    -------
    (float, float)
        The bounds as floats.

    Raises
    ------
    InputError
        Unless they are two finite numbers with 0 < least < greatest.
    """
    try:
        low, high = (float(b) for b in bounds)
    except (TypeError, ValueError):
        raise InputError(f"{option}: {bounds!r} must be two numbers LOW HIGH") from None
    if not (math.isfinite(low) and math.isfinite(high) and 0 < low < high):
        raise InputError(f"{option}: {low:g} {high:g} must be finite with 0 < LOW < HIGH")
    return low, high


def _finite(value: object) -> bool:
    return isinstance(value, (int, float)) and math.isfinite(value)


def figure_text(value: object, spec: str) -> str:
    """A figure as text for a reader: formatted by `spec`, or "n/a" when it is missing or not finite
    (a metric that is no number is never shown as one).

    Parameters
    ----------
    value : float or None
        The figure (None where JSON held a non-finite number).
    spec : str
        A format spec, e.g. ">11.5g".

    Returns
    -------
    str
        `format(value, spec)`; with a fixed-point spec ("f") and |value| >= 1e6, 3 significant
        digits in the same width instead (an absurd figure is not printed digit by digit); "n/a"
        right-aligned in the spec's width when the value is missing or not finite.
    """
    width = "".join(c for c in spec.split(".")[0] if c.isdigit())
    if not _finite(value):
        return format("n/a", f">{width}" if width else "")
    if spec.endswith("f") and abs(value) >= 1e6:  # type: ignore[arg-type]
        spec = f"{spec.split('.')[0]}.3g"
    return format(value, spec)


def metric_diagnostics(metrics: Mapping[str, Mapping]) -> list[Diagnostic]:
    """A `worse_than_null` diagnostic for every model whose holdout metrics are broken.

    A model is flagged when its mean deviance or D^2 is not a finite number, when its mean deviance
    is above the null model's (`deviance_to_null` > 1, the null being the constant rate of the
    training rows, `premiumlab.evaluation.holdout.null_rate`), or when D^2 < -1 (`ABSURD_D2`: a
    deviance more than twice that of the holdout's own mean); a ratio above 1e6
    (`ABSURD_DEVIANCE_RATIO`) is called absurd.

    Parameters
    ----------
    metrics : mapping
        `holdout_metrics`' result: per target `null` and `models` with `mean_deviance`, `d2` and
        `deviance_to_null` (None or NaN when not finite).

    Returns
    -------
    list of Diagnostic
        One per flagged model, in target and model order, its message naming the figures.
    """
    found = []
    for target, block in metrics.items():
        null = block.get("null", {})
        null_text = (
            f"the null model's {null['mean_deviance']:.4g} (a constant {null['rate']:.4g} fitted on the training rows)"
            if _finite(null.get("mean_deviance")) and _finite(null.get("rate"))
            else "the null model's (not defined: the training rows have no claims)"
        )
        for name, m in block["models"].items():
            deviance, d2, ratio = m.get("mean_deviance"), m.get("d2"), m.get("deviance_to_null")
            if not (_finite(deviance) and _finite(d2)):
                reason = (
                    f"{target} holdout mean deviance ({deviance}) or D^2 ({d2}) is not a finite number: "
                    "the model's predictions cannot be compared"
                )
            elif _finite(ratio) and ratio > 1:
                absurd = ratio > ABSURD_DEVIANCE_RATIO or d2 < ABSURD_D2
                worse = f"{ratio - 1:.2%} above" if ratio < 10 else f"{ratio:.3g} times"
                verdict = "; absurd figures: the model is broken, do not use them" if absurd else ""
                reason = f"{target} holdout mean deviance {deviance:.4g} is {worse} {null_text}; D^2 {d2:.4g}{verdict}"
            elif d2 < ABSURD_D2:
                reason = (
                    f"{target} holdout D^2 {d2:.4g} is below {ABSURD_D2:g}: its mean deviance {deviance:.4g} "
                    "is more than twice that of the holdout's own mean; absurd figures: the model is broken"
                )
            else:
                continue
            found.append(Diagnostic("worse_than_null", name, reason))
    return found


def relativity_diagnostics(
    model: str,
    relativities: Mapping[str, Mapping[str, float | None]],
    bounds: tuple[float, float] = PLAUSIBLE_RELATIVITY,
    control: tuple[str, ...] | list[str] = (),
) -> list[Diagnostic]:
    """A `relativity_bounds` diagnostic for every relativity of a model outside `bounds`.

    Parameters
    ----------
    model : str
        The model's name (e.g. "glm_frequency").
    relativities : mapping
        Factor -> level or band -> relativity (a GLM model JSON's `relativities`; None for a value
        that was not finite).
    bounds : (float, float)
        Least and greatest plausible relativity, inclusive (default [0.2, 5], `PLAUSIBLE_RELATIVITY`:
        a common-practice default, not a rule).
    control : sequence of str
        Factors fitted as controls and never tabled (a GLM JSON's `control`): not checked.

    Returns
    -------
    list of Diagnostic
        One per relativity below the least bound, above the greatest or not finite, in factor and
        level order, naming the factor and the level.
    """
    low, high = bounds
    where = f"the plausibility bounds [{low:g}, {high:g}]" + (
        " (a common-practice default)" if tuple(bounds) == PLAUSIBLE_RELATIVITY else ""
    )
    found = []
    for factor, levels in relativities.items():
        if factor in control:
            continue
        for level, value in levels.items():
            if _finite(value) and low <= value <= high:  # type: ignore[operator]
                continue
            text = f"relativity {value:.4g}" if _finite(value) else f"relativity {value} (not finite)"
            found.append(Diagnostic("relativity_bounds", model, f"{text} is outside {where}", factor, str(level)))
    return found
