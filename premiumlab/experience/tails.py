"""Large-loss threshold aid: mean excess by threshold, a generalised Pareto fit above a threshold
with its standard errors and a profile-likelihood interval for the shape, and the shape by threshold.

Mean excess e(u) = sum over x > u of (x - u) / #{x > u}, with standard error sd(x - u | x > u) /
sqrt(#{x > u}) (sample standard deviation of the excesses). Above a threshold where the tail is
generalised Pareto with shape xi < 1, e(u) is linear in u with slope xi / (1 - xi): a threshold is
read where the mean-excess plot turns straight. Above the chosen threshold u the excesses
y = x - u are fitted by maximum likelihood with scipy.stats.genpareto (location 0), whose
distribution function is F(y) = 1 - (1 + xi y / beta)^(-1 / xi) (shape xi, scale beta in money).

Standard errors are those of the inverse expected information of n excesses (valid for xi > -1/2):
Var(xi) = (1 + xi)^2 / n, Var(beta) = 2 beta^2 (1 + xi) / n, Cov(xi, beta) = -beta (1 + xi) / n
(recalled from memory; the tests check them against a numerical Hessian of the log-likelihood and
against the spread of repeated fits). The 95 % interval for the shape is where the profile
log-likelihood max over beta of l(xi, beta) lies within chi2(1, 0.95) / 2 = 1.92 of its maximum.
Above a valid threshold the shape and the modified scale beta* = beta - xi u stay level as u rises:
the stability table gives both, with standard errors, at a range of thresholds.

The losses are single claims when the spec names a claims file (catastrophe claims left out, as
the cap leaves them), otherwise the positive amount of each row (a policy in a period; a book of
single losses, one row per claim, is then a list of claims). With [experience] trend set they are
trended for severity to the future policy period, so that u reads as a cap in that money.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab.results import TailFit

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

#: Fewest exceedances the fit accepts (a maximum-likelihood fit on fewer says little).
MIN_EXCEEDANCES = 10
#: Fewest exceedances at the last threshold of the mean-excess table and plot.
TABLE_MIN_EXCEEDANCES = 5
#: Default threshold: this quantile of the losses, a starting point to read the plot from.
DEFAULT_QUANTILE = 0.9
#: Points of the mean-excess table, and of the mean-excess plot.
GRID_POINTS = 50
PLOT_POINTS = 1000
#: Quantiles of the losses at which the stability table refits the tail.
STABILITY_QUANTILES = tuple(float(q) for q in np.linspace(0.80, 0.99, 10))
#: Profile-likelihood interval for the shape: its level and the drop in log-likelihood, chi2(1, level) / 2.
INTERVAL_LEVEL = 0.95
#: The shape range the profile interval is searched in (below -1 the likelihood is unbounded).
SHAPE_SEARCH = (-0.99, 10.0)
#: What the losses are: the first words of TailFit.basis.
BASIS_CLAIMS = "single claims from the claims file"
BASIS_ROWS = "per policy-period row totals"


def _mean_excess(losses: np.ndarray, thresholds: np.ndarray) -> pd.DataFrame:
    """Per threshold u: exceedances #{x > u}, the mean excess e(u) and its standard error
    sd(x - u | x > u) / sqrt(#{x > u}) (sample sd, ddof 1; NaN with fewer than two exceedances,
    e(u) NaN with none)."""
    x = np.sort(np.asarray(losses, dtype=float))
    u = np.asarray(thresholds, dtype=float)
    above = len(x) - np.searchsorted(x, u, side="right")
    # sums over the k largest losses of x - c and (x - c)^2, c the median (keeps the squares small)
    centre = float(np.median(x)) if x.size else 0.0
    d = x - centre
    top_sum = np.concatenate([np.cumsum(d[::-1])[::-1], [0.0]])[len(x) - above]
    top_squares = np.concatenate([np.cumsum((d * d)[::-1])[::-1], [0.0]])[len(x) - above]
    with np.errstate(invalid="ignore", divide="ignore"):
        excess = np.where(above > 0, top_sum / above - (u - centre), np.nan)
        squares = np.maximum(top_squares - top_sum**2 / above, 0.0)  # sum of squared deviations of the excesses
        se = np.where(above > 1, np.sqrt(squares / (above - 1) / above), np.nan)
    return pd.DataFrame(
        {"threshold": u, "exceedances": above.astype(np.int64), "mean_excess": excess, "standard_error": se}
    )


def _threshold_grid(losses: np.ndarray, points: int = GRID_POINTS) -> np.ndarray:
    """The mean-excess table's thresholds: the losses leaving k losses above them, for `points`
    values of k spaced evenly in log k from all but one (the smallest loss) down to
    TABLE_MIN_EXCEEDANCES, so that the tail gets as many rows as the body."""
    x = np.sort(np.asarray(losses, dtype=float))
    top = max(len(x) - 1, 1)
    k = np.unique(np.geomspace(top, min(TABLE_MIN_EXCEEDANCES, top), points).round().astype(np.int64))
    return np.unique(x[len(x) - 1 - k])


def _plot_grid(losses: np.ndarray, points: int = PLOT_POINTS) -> np.ndarray:
    """The mean-excess plot's thresholds: up to `points` losses evenly spaced in rank from the
    smallest to the one leaving TABLE_MIN_EXCEEDANCES above it."""
    x = np.sort(np.asarray(losses, dtype=float))
    last = max(0, len(x) - TABLE_MIN_EXCEEDANCES - 1)
    return np.unique(x[np.linspace(0, last, min(points, last + 1)).round().astype(np.int64)])


def _mean_excess_rows(losses: np.ndarray, threshold: float, cap: float | None) -> list[dict]:
    """The mean-excess table: the grid of `_threshold_grid` plus the chosen threshold (mark
    "threshold") and the spec's large-loss cap (mark "large_loss_cap") when set, by threshold."""
    marks = {float(v): "" for v in _threshold_grid(losses)}
    for value, name in ((threshold, "threshold"), (cap, "large_loss_cap")):
        if value is not None:
            marks[float(value)] = ", ".join(filter(None, (marks.get(float(value), ""), name)))
    table = _mean_excess(losses, np.array(sorted(marks)))
    table["mark"] = [marks[float(u)] for u in table["threshold"]]
    return table.to_dict(orient="records")


def _gpd_covariance(shape: float, scale: float, n: int) -> np.ndarray:
    """Covariance of (shape, scale) estimated from n excesses: the inverse expected information of
    the module docstring, [[(1 + xi)^2, -beta (1 + xi)], [-beta (1 + xi), 2 beta^2 (1 + xi)]] / n;
    NaN for xi <= -1/2, where the maximum-likelihood estimate is not asymptotically normal."""
    if not shape > -0.5:
        return np.full((2, 2), np.nan)
    a = 1.0 + shape
    return np.array([[a * a, -scale * a], [-scale * a, 2.0 * scale * scale * a]]) / n


def _profile_loglik(excesses: np.ndarray, shape: float) -> float:
    """max over beta of the generalised Pareto log-likelihood of the excesses at shape `shape`
    (bounded one-dimensional search in log beta; for xi < 0 beta must exceed -xi max(y))."""
    from scipy.optimize import minimize_scalar
    from scipy.stats import genpareto

    y = np.asarray(excesses, dtype=float)
    low = max(-shape * float(y.max()), 1e-9 * float(y.mean()))
    result = minimize_scalar(
        lambda t: -float(genpareto.logpdf(y, shape, scale=np.exp(t)).sum()),
        bounds=(np.log(low) + 1e-12, np.log(1e3 * float(y.max()))),
        method="bounded",
        options={"xatol": 1e-9},
    )
    return -float(result.fun)


def _profile_interval(
    excesses: np.ndarray, shape: float, scale: float, shape_se: float
) -> tuple[float | None, float | None]:
    """The INTERVAL_LEVEL profile-likelihood interval for the shape: the xi on each side of the
    estimate where the profile log-likelihood has dropped chi2(1, INTERVAL_LEVEL) / 2 below its
    maximum (scipy.optimize.brentq), searched within SHAPE_SEARCH by steps of 2, 4, 8, ... standard
    errors; None for an end not reached within SHAPE_SEARCH."""
    from scipy.optimize import brentq
    from scipy.stats import chi2, genpareto

    drop = float(chi2.ppf(INTERVAL_LEVEL, 1)) / 2.0
    fitted = float(genpareto.logpdf(excesses, shape, scale=scale).sum())
    top = max(fitted, _profile_loglik(excesses, shape))

    def below_cut(xi: float) -> float:
        return top - drop - _profile_loglik(excesses, xi)

    step = shape_se if np.isfinite(shape_se) and shape_se > 0 else 0.1
    ends: list[float | None] = []
    for direction, limit in ((-1.0, SHAPE_SEARCH[0]), (1.0, SHAPE_SEARCH[1])):
        inner, end = shape, None
        for multiple in (2.0, 4.0, 8.0, 16.0, 32.0):
            outer = float(np.clip(shape + direction * multiple * step, *SHAPE_SEARCH))
            if below_cut(outer) > 0:
                end = float(brentq(below_cut, min(inner, outer), max(inner, outer), xtol=1e-6))
                break
            inner = outer
            if outer == limit:
                break
        ends.append(end)
    return ends[0], ends[1]


@dataclass(frozen=True)
class ParetoFit:
    """The generalised Pareto fit above `threshold` (money): shape xi and scale beta (money) with
    their standard errors (NaN for xi <= -1/2), the modified scale beta - xi u (money) with its
    standard error (delta method), the exceedances, and their share of the losses by number and
    by amount."""

    threshold: float
    exceedances: int
    losses: int
    shape: float
    scale: float
    share_of_losses: float
    share_of_amount: float
    shape_se: float
    scale_se: float
    modified_scale: float
    modified_scale_se: float


def _fit_tail(losses: np.ndarray, threshold: float) -> ParetoFit:
    """Maximum-likelihood generalised Pareto fit to the excesses over `threshold` (location 0),
    with the standard errors of `_gpd_covariance`; Var(beta - xi u) = Var(beta) - 2 u Cov + u^2 Var(xi)."""
    from scipy.stats import genpareto

    x = np.asarray(losses, dtype=float)
    above = x[x > threshold]
    if above.size < MIN_EXCEEDANCES:
        raise InputError(
            f"--threshold: {threshold:g} leaves {above.size} losses above it; the fit needs at "
            f"least {MIN_EXCEEDANCES}: choose a lower threshold"
        )
    shape, _, scale = genpareto.fit(above - threshold, floc=0.0)
    cov = _gpd_covariance(float(shape), float(scale), int(above.size))
    gradient = np.array([-threshold, 1.0])  # of beta - xi u with respect to (xi, beta)
    return ParetoFit(
        threshold=float(threshold),
        exceedances=int(above.size),
        losses=int(x.size),
        shape=float(shape),
        scale=float(scale),
        share_of_losses=above.size / x.size,
        share_of_amount=float(above.sum() / x.sum()),
        shape_se=float(np.sqrt(cov[0, 0])),
        scale_se=float(np.sqrt(cov[1, 1])),
        modified_scale=float(scale - shape * threshold),
        modified_scale_se=float(np.sqrt(gradient @ cov @ gradient)),
    )


def _stability_rows(losses: np.ndarray) -> list[dict]:
    """The threshold-stability table: at each STABILITY_QUANTILES quantile of the losses that
    leaves at least MIN_EXCEEDANCES above it, the threshold, exceedances, shape and modified scale
    beta - xi u with their standard errors (ParetoFit fields)."""
    x = np.asarray(losses, dtype=float)
    rows = []
    for u in np.unique(np.quantile(x, STABILITY_QUANTILES)):
        if (x > u).sum() >= MIN_EXCEEDANCES:
            fit = _fit_tail(x, float(u))
            rows.append(
                {
                    k: getattr(fit, k)
                    for k in ("threshold", "exceedances", "shape", "shape_se", "modified_scale", "modified_scale_se")
                }
            )
    return rows


def amount_text(value: float) -> str:
    """An amount as text for a label or a table, with thousands separators and no exponent.

    Parameters
    ----------
    value : float
        The amount (money).

    Returns
    -------
    str
        Whole units from 100 up (25000 -> "25,000", 1042700.5 -> "1,042,700"), four significant
        digits below (6.65 -> "6.65").
    """
    return f"{value:,.0f}" if abs(value) >= 100 else f"{value:,.4g}"


def _amount_axis(ax: Axes, axis: str = "x", log: bool = False) -> None:
    """Label an amount axis with `_amount_text`: at most five ticks on a linear axis, decades on
    a log axis without minor labels, x tick labels slanted so that long amounts do not meet."""
    from matplotlib.ticker import FuncFormatter, LogLocator, MaxNLocator, NullFormatter

    target = ax.xaxis if axis == "x" else ax.yaxis
    target.set_major_locator(LogLocator(base=10.0, numticks=6) if log else MaxNLocator(nbins=5))
    target.set_major_formatter(FuncFormatter(lambda v, _pos: amount_text(v)))
    target.set_minor_formatter(NullFormatter())
    if axis == "x":
        ax.tick_params(axis="x", labelrotation=30)
        for label in ax.get_xticklabels():
            label.set_horizontalalignment("right")


def _loss_words(basis: str) -> str:
    """What one loss is, in money: per claim or per policy-period row."""
    return "money per claim" if basis.startswith(BASIS_CLAIMS) else "money per policy-period row"


def _mean_excess_panel(ax: Axes, table: pd.DataFrame, threshold: float, cap: float | None, per: str) -> None:
    """The mean-excess plot of `table` (threshold, mean_excess, standard_error) with a band of 1.96
    standard errors, the threshold and (when inside the table's range) the cap marked."""
    from premiumlab._core.plotting import SERIES_COLOURS

    band = 1.96 * table["standard_error"].to_numpy(float)
    mean = table["mean_excess"].to_numpy(float)
    colour = SERIES_COLOURS["actual"]
    ax.fill_between(
        table["threshold"],
        mean - band,
        mean + band,
        color=colour,
        alpha=0.18,
        linewidth=0,
        label="± 1.96 standard errors",
    )
    ax.plot(table["threshold"], mean, color=colour, linewidth=1, label="mean excess")
    if cap is not None and cap <= float(table["threshold"].max()):
        ax.axvline(
            cap, color=SERIES_COLOURS["other"], linestyle=":", linewidth=1, label=f"large_loss_cap {amount_text(cap)}"
        )
    ax.set_xlabel(f"threshold u ({per})")
    ax.set_ylabel("mean excess e(u) of the losses above u (money)")
    ax.set_title(f"Mean excess by threshold (down to {TABLE_MIN_EXCEEDANCES} losses above u)", fontsize=10)


def _stability_panels(shape_ax: Axes, scale_ax: Axes, stability: Sequence[Mapping], per: str) -> None:
    """The shape and the modified scale by threshold with bars of 1.96 standard errors."""
    from premiumlab._core.plotting import SERIES_COLOURS

    u = np.array([row["threshold"] for row in stability], dtype=float)
    for ax, key, label in (
        (shape_ax, "shape", "shape ξ of the excesses over u"),
        (scale_ax, "modified_scale", "modified scale β − ξu (money)"),
    ):
        value = np.array([row[key] for row in stability], dtype=float)
        se = np.array([row[f"{key}_se"] for row in stability], dtype=float)
        ax.errorbar(u, value, yerr=1.96 * se, marker="o", color=SERIES_COLOURS["actual"], linewidth=1, capsize=3)
        ax.set_xlabel(f"threshold u ({per})")
        ax.set_ylabel(label)
        ax.set_title(f"{key.replace('_', ' ').capitalize()} by threshold (± 1.96 standard errors)", fontsize=10)


def _mark_threshold(axes: Sequence[Axes], threshold: float) -> None:
    """A dashed line at the threshold on each of `axes`."""
    from premiumlab._core.plotting import SERIES_COLOURS

    for ax in axes:
        ax.axvline(
            threshold,
            color=SERIES_COLOURS["tail_fit"],
            linestyle="--",
            linewidth=1,
            label=f"threshold {amount_text(threshold)}",
        )


def _tail_figure(losses: np.ndarray, fit: ParetoFit, stability: list[dict], basis: str, cap: float | None) -> Figure:
    """Four panels: the mean-excess plot (at the thresholds of `_plot_grid`) with a band of 1.96
    standard errors and the threshold (and the cap) marked; the empirical survival of the losses
    above the threshold against the fitted generalised Pareto survival (log scales); and the
    shape and the modified scale by threshold with bars of 1.96 standard errors."""
    from scipy.stats import genpareto

    from premiumlab._core.plotting import SERIES_COLOURS, new_figure, plain_axes

    per = _loss_words(basis)
    fig = new_figure(width=11.0, height=8.6)
    fig.suptitle(f"Tail of {fit.losses:,} losses: {basis}", fontsize=10)
    (mean_ax, tail_ax), (shape_ax, scale_ax) = fig.subplots(2, 2)
    _mark_threshold((mean_ax, shape_ax, scale_ax), fit.threshold)
    _mean_excess_panel(mean_ax, _mean_excess(losses, _plot_grid(losses)), fit.threshold, cap, per)
    mean_ax.legend(frameon=False, fontsize=8)

    excess = np.sort(np.asarray(losses, dtype=float)[np.asarray(losses) > fit.threshold]) - fit.threshold
    empirical = 1.0 - np.arange(excess.size) / excess.size
    tail_ax.loglog(excess + fit.threshold, empirical, linestyle="none", marker=".", color="#202020", label="losses")
    grid = np.geomspace(max(excess.min(), 1e-9 * fit.scale), excess.max(), 200)
    tail_ax.loglog(
        grid + fit.threshold,
        genpareto.sf(grid, fit.shape, scale=fit.scale),
        color=SERIES_COLOURS["tail_fit"],
        label=f"generalised Pareto: shape {fit.shape:.3f}, scale {amount_text(fit.scale)}",
    )
    tail_ax.set_xlabel(f"loss ({per})")
    tail_ax.set_ylabel("share of the exceedances above the loss")
    tail_ax.set_title(f"Tail above the threshold ({fit.exceedances:,} losses)")
    tail_ax.legend(frameon=False, fontsize=8)

    _stability_panels(shape_ax, scale_ax, stability, per)
    shape_ax.legend(frameon=False, fontsize=8)
    for ax, log in ((mean_ax, False), (tail_ax, True), (shape_ax, False), (scale_ax, False)):
        plain_axes(ax)
        _amount_axis(ax, "x", log=log)
    _amount_axis(mean_ax, "y")
    _amount_axis(scale_ax, "y")
    return fig


def plot_tail_tables(result: Mapping, path: str | Path, *, caution: bool = True) -> Path:
    """The figure of a `tails` result from its tables alone (the `tails --json` object): the
    mean-excess plot at the table's thresholds with a band of 1.96 standard errors, and the shape
    and the modified scale by threshold with bars of 1.96 standard errors; the threshold and the
    cap marked. (The losses themselves are not in the result, so their tail is not drawn.)

    Parameters
    ----------
    result : mapping
        A `TailFit.to_dict()` (keys threshold, basis, losses, large_loss_cap, mean_excess, stability).
    path : str or Path
        The PNG file to write; its folder must exist.
    caution : bool
        Add the draft caution as a footer.

    Returns
    -------
    Path
        `path`, written.
    """
    from premiumlab._core.plotting import new_figure, plain_axes, save_figure

    per = _loss_words(result["basis"])
    fig = new_figure(width=15.0, height=4.8)
    fig.suptitle(f"Tail of {result['losses']:,} losses: {result['basis']}", fontsize=10)
    mean_ax, shape_ax, scale_ax = fig.subplots(1, 3)
    _mark_threshold((mean_ax, shape_ax, scale_ax), float(result["threshold"]))
    _mean_excess_panel(
        mean_ax, pd.DataFrame(list(result["mean_excess"])), float(result["threshold"]), result["large_loss_cap"], per
    )
    _stability_panels(shape_ax, scale_ax, result["stability"], per)
    mean_ax.legend(frameon=False, fontsize=8)
    for ax in (mean_ax, shape_ax, scale_ax):
        plain_axes(ax)
        _amount_axis(ax, "x")
    _amount_axis(mean_ax, "y")
    _amount_axis(scale_ax, "y")
    return save_figure(fig, path, caution=caution)


def _plot_tail(
    losses: np.ndarray, fit: ParetoFit, stability: list[dict], basis: str, cap: float | None, path: str | Path
) -> Path:
    """Draw `_tail_figure` and write it to `path` (.png) with the caution footer."""
    from premiumlab._core.plotting import save_figure

    return save_figure(_tail_figure(losses, fit, stability, basis, cap), path)


def _tail_losses(book_path: str | Path, spec_path: str | Path) -> tuple[np.ndarray, str, float | None]:
    """The losses of the module docstring, a phrase saying what they are (starting with
    BASIS_CLAIMS or BASIS_ROWS) and the spec's large_loss_cap (money, or None)."""
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
        losses, basis = claims.amount[keep] * trend[claims.row[keep]], BASIS_CLAIMS
        if exp.catastrophe_column:
            basis += f", catastrophe claims ({exp.catastrophe_column}) left out"
    else:
        keep = amount > 0
        losses, basis = amount[keep] * trend[keep], BASIS_ROWS
    if exp.trend.get("severity"):
        basis += ", trended for severity to the future policy period"
    if losses.size <= MIN_EXCEEDANCES:
        raise InputError(
            f"{book_path}: {losses.size} positive losses; the threshold aid needs more than {MIN_EXCEEDANCES}"
        )
    return losses, basis, exp.large_loss_cap


def threshold_aid(
    book_path: str | Path,
    spec_path: str | Path,
    threshold: float | None = None,
    figure: str | Path | None = None,
    force: bool = False,
) -> TailFit:
    """The `tails` command: the mean-excess table, the fit above `threshold` (default: the
    DEFAULT_QUANTILE quantile of the losses) with standard errors and the profile interval of its
    shape, the threshold-stability table and optionally the figure.

    Parameters
    ----------
    book_path, spec_path : str or Path
        The book and its pricing spec (the losses are those of the module docstring).
    threshold : float or None
        Threshold u (money); None for the DEFAULT_QUANTILE quantile of the losses.
    figure : str or Path or None
        Also write the mean-excess, tail and stability figure here (.png).
    force : bool
        Replace an existing figure.

    Returns
    -------
    TailFit
        The fit above u with standard errors and the shape interval, what the losses are, notes,
        the mean-excess table (thresholds of `_threshold_grid` plus u and the spec's
        large_loss_cap), the stability table and the cautions.
    """
    from premiumlab._core.cautions import DRAFT

    if threshold is not None and not (np.isfinite(threshold) and threshold >= 0):
        raise InputError(f"--threshold: {threshold!r} must be a finite amount >= 0")
    losses, basis, cap = _tail_losses(book_path, spec_path)
    u = float(np.quantile(losses, DEFAULT_QUANTILE)) if threshold is None else float(threshold)
    fit = _fit_tail(losses, u)
    low, high = _profile_interval(losses[losses > u] - u, fit.shape, fit.scale, fit.shape_se)
    stability = _stability_rows(losses)
    if figure is not None:
        from premiumlab._core.outputs import atomic_files

        target = Path(figure)
        if target.suffix.lower() != ".png":
            raise InputError(f"{target}: the figure must be a .png file")
        with atomic_files([target], force=force, inputs=(book_path, spec_path)) as tmp:
            _plot_tail(losses, fit, stability, basis, cap, tmp / target.name)
    notes = []
    if fit.shape >= 1.0:
        notes.append(
            "shape >= 1: the fitted tail has no finite mean; a cap and an excess load from a longer history are needed"
        )
    if not fit.shape > -0.5:
        notes.append("shape <= -0.5: the standard errors do not apply (the estimate is not asymptotically normal)")
    for end, name in ((low, "lower"), (high, "upper")):
        if end is None:
            notes.append(
                f"the {name} end of the shape's {INTERVAL_LEVEL:.0%} profile interval lies outside "
                f"[{SHAPE_SEARCH[0]:g}, {SHAPE_SEARCH[1]:g}]"
            )
    return TailFit(
        **asdict(fit),
        basis=basis,
        default_threshold=threshold is None,
        notes=tuple(notes),
        mean_excess=tuple(_mean_excess_rows(losses, u, cap)),
        cautions=(DRAFT,),
        shape_interval=(low, high),
        large_loss_cap=cap,
        stability=tuple(stability),
    )
