"""The rich tables the command line prints: one number format per column, text left, numbers right.

Each column's format says what its figures are: counts and money with thousands separators, rates
and relativities with fixed decimals, shares as percentages. `premiumlab.cli.console.show` prints
them (plain and wide when stdout is not a terminal).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pandas as pd
    from rich.table import Table

    from premiumlab.results import Comparison, ImpactResult

Format = Callable[[Any], str]


def _finite(fmt: str) -> Format:
    def text(value: Any) -> str:
        if isinstance(value, str):  # a cell left blank on purpose
            return value
        if value is None or (isinstance(value, float) and not math.isfinite(value)):
            return "n/a"
        return format(value, fmt)

    return text


#: Column formats: counts and money with thousands separators, fixed decimals, percentages.
COUNT = _finite(",.0f")
MONEY = _finite(",.2f")
AMOUNT = _finite(",.0f")
EXPOSURE = _finite(",.1f")
RATE = _finite(".4f")
RELATIVITY = _finite(".4f")
SHARE = _finite(".1%")
CHANGE = _finite("+.2%")
DEVIANCE = _finite(",.5g")


def table(title: str | None, columns: Sequence[tuple[str, Format | None]], rows: Iterable[Sequence[Any]]) -> Table:
    """A table with a header: text columns (format None) left-aligned, number columns right-aligned.

    Parameters
    ----------
    title : str or None
        The caption above the table.
    columns : sequence of (str, callable or None)
        Each column's header and the format of its figures (None: text, printed as given).
    rows : iterable of sequences
        The rows' values, one per column.

    Returns
    -------
    rich.table.Table
        Borderless apart from a line under the header.
    """
    from rich import box
    from rich.table import Table

    out = Table(title=title, title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False)
    for header, fmt in columns:
        out.add_column(header, justify="left" if fmt is None else "right", no_wrap=True)
    for row in rows:
        out.add_row(*(str(v) if fmt is None else fmt(v) for v, (_, fmt) in zip(row, columns, strict=True)))
    return out


#: `validate`'s profile columns and their formats (others: 4 significant digits).
PROFILE_FORMATS: Mapping[str, Format] = {
    "exposure": EXPOSURE,
    "claims": COUNT,
    "amount": AMOUNT,
    "frequency": RATE,
    "severity": AMOUNT,
    "loss_cost": MONEY,
}


#: `validate`'s profile columns with their units in the header.
PROFILE_HEADERS: Mapping[str, str] = {
    "exposure": "exposure (exposure units)",
    "claims": "claims (count)",
    "amount": "amount (money)",
    "frequency": "frequency (claims per exposure unit)",
    "severity": "severity (money per claim)",
    "loss_cost": "loss cost (money per exposure unit)",
}


def profile_table(name: str, frame: pd.DataFrame) -> Table:
    """`validate`: one profile table (a factor's levels, or the whole book) with one format per column.

    Parameters
    ----------
    name : str
        The factor, or "(overall)".
    frame : pandas.DataFrame
        The profile: one row per level, columns exposure (years), claims, amount (money),
        frequency (claims per exposure year), severity (amount per claim), loss_cost (amount per
        exposure year).

    Returns
    -------
    rich.table.Table
        Titled `profile: NAME`; the level column first (headed "level").
    """
    columns = [
        ("level" if frame.index.name else "", None),
        *((PROFILE_HEADERS.get(str(c), str(c)), PROFILE_FORMATS.get(str(c), _finite(",.4g"))) for c in frame.columns),
    ]
    rows = ([label, *values] for label, values in zip(frame.index, frame.itertuples(index=False), strict=True))
    return table(f"profile: {name}", columns, rows)


def comparison_table(result: Comparison) -> Table:
    """`compare`: the holdout metrics of each target's null model and models.

    Parameters
    ----------
    result : Comparison
        What `compare` returned.

    Returns
    -------
    rich.table.Table
        Target, model, mean deviance, D^2, Gini, balance (predicted over actual) and the mean
        deviance over the null's; a model with a `worse_than_null` diagnostic marked "!".
    """
    broken = {d.model for d in result.diagnostics if d.kind == "worse_than_null"}
    rows = []
    for target, block in result.metrics.items():
        null = block.get("null")
        if null is not None:
            rows.append([target, "null (constant)", null["mean_deviance"], None, None, None, None, ""])
        for name, m in block["models"].items():
            rows.append(
                [
                    target,
                    name,
                    m["mean_deviance"],
                    m["d2"],
                    m["gini"],
                    m["balance"],
                    m.get("deviance_to_null"),
                    "!" if name in broken else "",
                ]
            )
    blank = _finite(".4f")
    columns: list[tuple[str, Format | None]] = [
        ("target", None),
        ("model", None),
        ("mean deviance", DEVIANCE),
        ("D^2", blank),
        ("Gini", blank),
        ("balance", blank),
        ("/ null", blank),
        ("", None),
    ]
    out = table(
        f"holdout: {result.holdout_rows:,} rows, Tweedie power {result.tweedie_power:.2f}",
        columns,
        ([*r[:3], *("" if v is None else v for v in r[3:7]), r[7]] for r in rows),
    )
    return out


def impact_band_table(bands: Sequence[Mapping[str, Any]], title: str) -> Table:
    """`impact`: rows and current premium per change band.

    Parameters
    ----------
    bands : sequence of mappings
        `ImpactResult.bands` (or the capped ones): band, count, count_share, current_premium,
        premium_share.
    title : str
        The caption.

    Returns
    -------
    rich.table.Table
        Band, rows, share of rows, current premium (money), share of the current premium.
    """
    columns: list[tuple[str, Format | None]] = [
        ("change", None),
        ("rows (count)", COUNT),
        ("% rows", SHARE),
        ("current premium (money)", MONEY),
        ("% premium", SHARE),
    ]
    rows = ([b["band"], b["count"], b["count_share"], b.get("current_premium"), b.get("premium_share")] for b in bands)
    return table(title, columns, rows)


#: How each capping figure is named and formatted in `impact`'s capping table.
CAPPING_FIGURES: tuple[tuple[str, str, Format], ...] = (
    ("cap", "cap on each policy's change (+-)", SHARE),
    ("capped_up", "rows held down at +cap (count)", COUNT),
    ("capped_down", "rows held up at -cap (count)", COUNT),
    ("total_proposed", "total proposed premium, uncapped (money)", MONEY),
    ("total_capped", "total premium after capping (money)", MONEY),
    ("off_balance", "off-balance of the capping", CHANGE),
    ("correction_factor", "base-rate correction to restore the total", _finite(".5f")),
)


def capping_table(capping: Mapping[str, Any]) -> Table:
    """`impact --cap`: the capping figures, each named in words with its own format.

    Parameters
    ----------
    capping : mapping
        `ImpactResult.capping`.

    Returns
    -------
    rich.table.Table
        One row per figure present.
    """
    rows = [[label, fmt(capping[key])] for key, label, fmt in CAPPING_FIGURES if key in capping]
    return table("capping", [("figure", None), ("value", lambda v: str(v))], rows)


def impact_tables(result: ImpactResult) -> list[Table]:
    """`impact`: the change bands, the increases above each threshold and the capping figures.

    Parameters
    ----------
    result : ImpactResult
        What `impact` returned.

    Returns
    -------
    list of rich.table.Table
        The band table, the threshold table and, with a cap, the capping table and the bands after
        capping and correction.
    """
    out = [impact_band_table(result.bands, "change from the current premium")]
    out.append(
        table(
            "increases above a threshold",
            [("increase above", None), ("rows (count)", COUNT), ("% rows", SHARE), ("% premium", SHARE)],
            (
                [f"{t['threshold']:.0%}", t["count"], t["count_share"], t.get("premium_share")]
                for t in result.above_thresholds
            ),
        )
    )
    if result.capping:
        out.append(capping_table(result.capping))
        after = result.capping.get("after_correction")
        if isinstance(after, Mapping) and after.get("bands"):
            out.append(impact_band_table(after["bands"], "change after capping and the base-rate correction"))
    return out


def rate_summary_table(rows: int, gross_total: float, at_minimum: int | None, fallback_rows: int) -> Table:
    """`rate`: the rows priced, their total gross premium and the rows not priced on their own cell.

    Parameters
    ----------
    rows : int
        Rows priced.
    gross_total : float
        Total gross premium (money).
    at_minimum : int or None
        Rows charged the minimum premium (None: the priced file has no such flag).
    fallback_rows : int
        Rows rated at a fallback level or a missing row, over all factors (a row counts once per
        factor).

    Returns
    -------
    rich.table.Table
        One row per figure.
    """
    figures: list[list[str]] = [
        ["rows priced (count)", COUNT(rows)],
        ["total gross premium (money)", MONEY(gross_total)],
        ["rows at the minimum premium (count)", "n/a" if at_minimum is None else COUNT(at_minimum)],
        ["rows rated at a fallback level or missing row (count)", COUNT(fallback_rows)],
    ]
    return table("rated", [("figure", None), ("value", lambda v: str(v))], figures)


#: A share with two decimals (the missing values' shares of rows and exposure).
SHARE_2 = _finite(".2%")
#: An interval's ends and a ratio to three significant digits.
RATIO = _finite(".3g")


def missing_values_table(lost: pd.DataFrame) -> Table:
    """`validate`: per factor with missing values, their rows, shares of rows and exposure and the
    claim frequency ratio of those rows to the others with its 95 % interval, flagged when it excludes 1.

    Parameters
    ----------
    lost : pandas.DataFrame
        The rows of `premiumlab.book.validate.missing_experience` with `rows_missing` > 0, indexed
        by factor.

    Returns
    -------
    rich.table.Table
        Factor, rows (count), % of rows, % of exposure, frequency ratio, its interval, flag.
    """
    columns: list[tuple[str, Format | None]] = [
        ("factor", None),
        ("rows missing (count)", COUNT),
        ("% rows", SHARE_2),
        ("% exposure", SHARE_2),
        ("frequency ratio", RATIO),
        ("95 % interval", None),
        ("", None),
    ]
    rows = (
        [
            name,
            row["rows_missing"],
            row["share_of_rows"],
            row["share_of_exposure"],
            row["frequency_ratio"],
            f"[{RATIO(row['ratio_lower'])}, {RATIO(row['ratio_upper'])}]",
            "differs" if row["differs"] else "",
        ]
        for name, row in lost.iterrows()
    )
    return table(None, columns, rows)


def fidelity_table(models: Mapping[str, Mapping[str, float]], source: str) -> Table:
    """`tabulate`: the mean deviance and Gini of the table and of each candidate on the holdout.

    Parameters
    ----------
    models : mapping
        `fidelity["models"]`: per name, `mean_deviance` and `gini`.
    source : str
        The source model, marked.

    Returns
    -------
    rich.table.Table
        Model, mean deviance, Gini and "<- source" beside the source.
    """
    columns: list[tuple[str, Format | None]] = [
        ("model", None),
        ("mean deviance", _finite(".6g")),
        ("Gini", RATE),
        ("", None),
    ]
    rows = ([name, s["mean_deviance"], s["gini"], "<- source" if name == source else ""] for name, s in models.items())
    return table(None, columns, rows)


def mean_excess_table(rows: Sequence[Mapping[str, Any]]) -> Table:
    """`tails`: rows of the mean-excess table.

    Parameters
    ----------
    rows : sequence of mappings
        `TailFit.mean_excess` rows (threshold, exceedances, mean_excess, standard_error, mark).

    Returns
    -------
    rich.table.Table
        Threshold (money), losses above it (count), mean excess and its standard error (money), mark.
    """
    columns: list[tuple[str, Format | None]] = [
        ("threshold (money)", AMOUNT),
        ("losses above (count)", COUNT),
        ("mean excess (money)", AMOUNT),
        ("standard error (money)", AMOUNT),
        ("", None),
    ]
    return table(
        "mean excess by threshold",
        columns,
        (
            [
                r["threshold"],
                r["exceedances"],
                r["mean_excess"],
                r.get("standard_error"),
                f"<- {r['mark']}" if r.get("mark") else "",
            ]
            for r in rows
        ),
    )


def stability_table(rows: Sequence[Mapping[str, Any]]) -> Table:
    """`tails`: the threshold-stability table.

    Parameters
    ----------
    rows : sequence of mappings
        `TailFit.stability` rows (threshold, exceedances, shape, shape_se, modified_scale,
        modified_scale_se).

    Returns
    -------
    rich.table.Table
        Threshold (money), losses above it (count), shape and its standard error, modified scale
        and its standard error (money).
    """
    columns: list[tuple[str, Format | None]] = [
        ("threshold (money)", AMOUNT),
        ("losses above (count)", COUNT),
        ("shape", RATE),
        ("standard error", RATE),
        ("modified scale (money)", AMOUNT),
        ("standard error (money)", AMOUNT),
    ]
    return table(
        "shape by threshold (above a threshold that suits, shape and modified scale stay level)",
        columns,
        (
            [r["threshold"], r["exceedances"], r["shape"], r["shape_se"], r["modified_scale"], r["modified_scale_se"]]
            for r in rows
        ),
    )
