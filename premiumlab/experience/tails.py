"""Large-loss threshold aid: mean excess by threshold and a generalised Pareto fit above a threshold.

Mean excess e(u) = sum over x > u of (x - u) / #{x > u}. Above a threshold where the tail is
generalised Pareto with shape xi < 1, e(u) is linear in u with slope xi / (1 - xi): a threshold is
read where the mean-excess plot turns straight. Above the chosen threshold u the excesses
y = x - u are fitted by maximum likelihood with scipy.stats.genpareto (location 0), whose
distribution function is F(y) = 1 - (1 + xi y / beta)^(-1 / xi) (shape xi, scale beta in money).

The losses are single claims when the spec names a claims file (catastrophe claims left out, as
the cap leaves them), otherwise the positive amount of each row (a policy in a period; a book of
single losses, one row per claim, is then a list of claims). With [experience] trend set they are
trended for severity to the future policy period, so that u reads as a cap in that money.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab.results import TailFit

#: Fewest exceedances the fit accepts (a maximum-likelihood fit on fewer says little).
MIN_EXCEEDANCES = 10
#: Default threshold: this quantile of the losses, a starting point to read the plot from.
DEFAULT_QUANTILE = 0.9
#: Points of the mean-excess table, and of the mean-excess plot.
GRID_POINTS = 50
PLOT_POINTS = 1000


def _mean_excess(losses: np.ndarray, thresholds: np.ndarray) -> pd.DataFrame:
    """Per threshold u: exceedances #{x > u} and the mean excess e(u) (NaN with no exceedance)."""
    x = np.sort(np.asarray(losses, dtype=float))
    u = np.asarray(thresholds, dtype=float)
    above = len(x) - np.searchsorted(x, u, side="right")
    top_sum = np.concatenate([np.cumsum(x[::-1])[::-1], [0.0]])[len(x) - above]
    with np.errstate(invalid="ignore", divide="ignore"):
        excess = np.where(above > 0, (top_sum - above * u) / above, np.nan)
    return pd.DataFrame({"threshold": u, "exceedances": above.astype(np.int64), "mean_excess": excess})


def _threshold_grid(losses: np.ndarray, points: int = GRID_POINTS) -> np.ndarray:
    """Thresholds from the smallest loss to the one leaving MIN_EXCEEDANCES above it, evenly spaced
    in rank (quantiles of the losses)."""
    x = np.sort(np.asarray(losses, dtype=float))
    last = max(0, len(x) - MIN_EXCEEDANCES - 1)
    return np.unique(x[np.linspace(0, last, points).round().astype(np.int64)])


@dataclass(frozen=True)
class ParetoFit:
    """The generalised Pareto fit above `threshold` (money): shape xi, scale beta (money), the
    exceedances, and their share of the losses by number and by amount."""

    threshold: float
    exceedances: int
    losses: int
    shape: float
    scale: float
    share_of_losses: float
    share_of_amount: float


def _fit_tail(losses: np.ndarray, threshold: float) -> ParetoFit:
    """Maximum-likelihood generalised Pareto fit to the excesses over `threshold` (location 0)."""
    from scipy.stats import genpareto

    x = np.asarray(losses, dtype=float)
    above = x[x > threshold]
    if above.size < MIN_EXCEEDANCES:
        raise InputError(
            f"--threshold: {threshold:g} leaves {above.size} losses above it; the fit needs at "
            f"least {MIN_EXCEEDANCES}: choose a lower threshold"
        )
    shape, _, scale = genpareto.fit(above - threshold, floc=0.0)
    return ParetoFit(
        threshold=float(threshold),
        exceedances=int(above.size),
        losses=int(x.size),
        shape=float(shape),
        scale=float(scale),
        share_of_losses=above.size / x.size,
        share_of_amount=float(above.sum() / x.sum()),
    )


def _plot_tail(losses: np.ndarray, fit: ParetoFit, path: str | Path) -> Path:
    """Two panels: the mean-excess plot (at up to PLOT_POINTS order statistics) with the threshold
    marked, and the empirical survival of the losses above the threshold against the fitted
    generalised Pareto survival (log scales)."""
    from scipy.stats import genpareto

    from premiumlab._core.plotting import new_figure, plain_axes, save_figure

    table = _mean_excess(losses, _threshold_grid(losses, min(len(losses), PLOT_POINTS)))
    fig = new_figure(width=10.0, height=4.4)
    left, right = fig.subplots(1, 2)
    left.plot(table["threshold"], table["mean_excess"], marker=".", color="#2b6a99", linewidth=1)
    left.axvline(fit.threshold, color="#c2582b", linestyle="--", linewidth=1, label=f"threshold {fit.threshold:,.4g}")
    left.set_xlabel("threshold u")
    left.set_ylabel("mean excess e(u)")
    left.set_title("Mean excess by threshold")
    left.legend(frameon=False)
    excess = np.sort(np.asarray(losses, dtype=float)[np.asarray(losses) > fit.threshold]) - fit.threshold
    empirical = 1.0 - np.arange(excess.size) / excess.size
    right.loglog(excess + fit.threshold, empirical, linestyle="none", marker=".", color="#202020", label="losses")
    grid = np.geomspace(max(excess.min(), 1e-9 * fit.scale), excess.max(), 200)
    right.loglog(
        grid + fit.threshold,
        genpareto.sf(grid, fit.shape, scale=fit.scale),
        color="#c2582b",
        label=f"GPD shape {fit.shape:.3f}, scale {fit.scale:,.4g}",
    )
    right.set_xlabel("loss")
    right.set_ylabel("share of exceedances above")
    right.set_title(f"Tail above the threshold ({fit.exceedances} losses)")
    right.legend(frameon=False)
    for ax in (left, right):
        plain_axes(ax)
    return save_figure(fig, path)


def _tail_losses(book_path: str | Path, spec_path: str | Path) -> tuple[np.ndarray, str]:
    """The losses of the module docstring and a phrase saying what they are."""
    from premiumlab.book.scan import load_book
    from premiumlab.book.spec import load_spec
    from premiumlab.experience.adjustments import (
        future_midpoint,
        read_claims,
        read_text_column,
        trend_factor,
        years_to_future,
    )

    spec = load_spec(spec_path)
    if spec.columns.claim_amount is None:
        raise InputError(f"{spec.source}: key 'columns.claim_amount' is not set; the threshold aid needs amounts")
    book = load_book(book_path, spec)
    amount = book.claim_amount
    assert amount is not None  # columns.claim_amount is set (checked above), so the book has amounts
    exp, c = spec.experience, spec.columns
    periods = read_text_column(book_path, c.period) if c.period else np.full(book.n_rows, "", dtype=object)
    labels, code = np.unique(periods.astype(str), return_inverse=True)
    trend = trend_factor(
        years_to_future(exp, labels, future_midpoint(exp, spec.table.effective_date)), exp.trend.get("severity", 0.0)
    )[code]
    if exp.claims_file is not None:
        claims = read_claims(
            Path(spec_path).parent / exp.claims_file,
            spec,
            book.policy,
            periods if c.period else None,
            amount,
        )
        keep = ~claims.catastrophe & (claims.amount > 0)
        losses, basis = claims.amount[keep] * trend[claims.row[keep]], "single claims of the claims file"
    else:
        keep = amount > 0
        losses, basis = amount[keep] * trend[keep], "row totals (one policy in one period)"
    if exp.trend.get("severity"):
        basis += ", trended for severity to the future policy period"
    if losses.size <= MIN_EXCEEDANCES:
        raise InputError(
            f"{book_path}: {losses.size} positive losses; the threshold aid needs more than {MIN_EXCEEDANCES}"
        )
    return losses, basis


def threshold_aid(
    book_path: str | Path,
    spec_path: str | Path,
    threshold: float | None = None,
    figure: str | Path | None = None,
    force: bool = False,
) -> TailFit:
    """The `tails` command: mean-excess table, the fit above `threshold` (default: the
    DEFAULT_QUANTILE quantile of the losses) and optionally the figure.

    Parameters
    ----------
    book_path, spec_path : str or Path
        The book and its pricing spec (the losses are those of the module docstring).
    threshold : float or None
        Threshold u (money); None for the DEFAULT_QUANTILE quantile of the losses.
    figure : str or Path or None
        Also write the mean-excess and tail figure here (.png).
    force : bool
        Replace an existing figure.

    Returns
    -------
    TailFit
        The fit above u, what the losses are, notes, the mean-excess table and the cautions.
    """
    from premiumlab._core.cautions import DRAFT

    if threshold is not None and not (np.isfinite(threshold) and threshold >= 0):
        raise InputError(f"--threshold: {threshold!r} must be a finite amount >= 0")
    losses, basis = _tail_losses(book_path, spec_path)
    u = float(np.quantile(losses, DEFAULT_QUANTILE)) if threshold is None else float(threshold)
    fit = _fit_tail(losses, u)
    table = _mean_excess(losses, _threshold_grid(losses))
    if figure is not None:
        from premiumlab._core.outputs import atomic_files

        target = Path(figure)
        if target.suffix.lower() != ".png":
            raise InputError(f"{target}: the figure must be a .png file")
        with atomic_files([target], force=force, inputs=(book_path, spec_path)) as tmp:
            _plot_tail(losses, fit, tmp / target.name)
    notes = []
    if fit.shape >= 1.0:
        notes.append(
            "shape >= 1: the fitted tail has no finite mean; a cap and an excess load from a longer history are needed"
        )
    return TailFit(
        **asdict(fit),
        basis=basis,
        default_threshold=threshold is None,
        notes=tuple(notes),
        mean_excess=tuple(table.to_dict(orient="records")),
        cautions=(DRAFT,),
    )
