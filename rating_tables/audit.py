"""Audit of a rating table: promised directions, base levels at 1, optional relativity bounds; and
promises kept only by flattening (adjacent bands or levels given one relativity), a remark.

Structural rules (bands covering (-inf, inf) without gap or overlap, finite positive relativities,
`file` paths inside the table folder) are enforced whenever a table is built or loaded, so a
`RatingTable` already satisfies them; `audit_path` reports a folder that breaks them as a violation.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from rating_tables.errors import TableError
from rating_tables.io import load
from rating_tables.table import (
    MISSING_LABEL,
    MONOTONE,
    Bands,
    CategoricalFactor,
    Cells,
    Factor,
    InteractionFactor,
    MainFactor,
    NumericFactor,
    RatingTable,
    band_index,
    band_labels,
    cell_labels,
    mapping_to_side,
)

MONOTONE_TOLERANCE = 1e-12  # relative step below which a reversal is floating-point noise


@dataclass(frozen=True)
class Violation:
    """One audit finding: which check, on which factor, where, what, and by how much.

    `amount` is in the unit the detail states (relative step, distance from 1, distance beyond a bound).
    """

    check: str
    factor: str | None
    where: str | None
    detail: str
    amount: float | None = None

    def __str__(self) -> str:
        size = "" if self.amount is None else f" (by {self.amount:.6g})"
        return f"{self.check}: {self.detail}{size}"


@dataclass(frozen=True)
class Flattening:
    """A promise kept by flattening: adjacent bands or levels of a promised factor that share one
    relativity after rounding (main effect x two-way relativities, in every combination of the
    other factors' cells). A remark, not a violation: the promise holds, but only by pooling.

    `levels` are the factor's bands (`kind` "bands") or levels (`kind` "levels") in the run, in
    order; `relativity` is the shared value, or None when it varies with the other factors' cells.
    """

    factor: str
    direction: str
    kind: str
    levels: tuple[str, ...]
    relativity: float | None

    @property
    def remark(self) -> str:
        """What was found, without the factor and the levels: the promise and the shared value."""
        value = (
            "one relativity in each combination of the other factors' cells"
            if self.relativity is None
            else f"one relativity, {self.relativity:.6g}"
        )
        return f"promised {self.direction}, kept by giving {len(self.levels)} adjacent {self.kind} {value}"

    def __str__(self) -> str:
        return f"factor {self.factor!r}, {'; '.join(self.levels)}: {self.remark}"


def audit(
    table: RatingTable,
    promises: dict[str, str] | None = None,
    bounds: dict[str, tuple[float | None, float | None]] | None = None,
) -> list[Violation]:
    """Findings on `table`; an empty list means it passes.

    Directions come from each factor's `monotone`, overridden or added by `promises`
    ({factor: increasing|decreasing|none}). A promised factor must move that way band to band
    (numeric) or level to level in file order (categorical); where it is in two-way tables the check
    is on main effect x two-way relativities, for every combination of the other factors' cells.
    Every factor needs a band or level whose relativity rounds to 1 at `relativity_decimals`
    (|r - 1| <= 0.5 x 10**-decimals; a categorical's `base` level when named), a two-way table a
    base row and a base column at 1. `bounds` ({factor or "*": (min, max)}, None for no limit)
    bounds every relativity, a factor's missing row's included. The missing row has no place in
    the band or level order and is never the base: the direction and base checks leave it out.

    Parameters
    ----------
    table : RatingTable
        The table to audit.
    promises : dict of str to str, optional
        Factor name -> `increasing`, `decreasing` or `none`, replacing that factor's `monotone`
        (e.g. the spec's promises). A name that is no numeric or categorical factor of the table
        is a `promise` violation.
    bounds : dict of str to (float or None, float or None), optional
        Factor name (a two-way table's too), or `*` for every factor without its own entry ->
        (least, greatest) relativity allowed, inclusive; None leaves that side open. A name that
        is no factor of the table is a `bounds` violation.

    Returns
    -------
    list of Violation
        In this order: `promise` findings; `monotone` findings, one per adjacent pair of cells
        where the relativity moves against the promise by a relative step
        |r_next / r - 1| > 1e-12 (`MONOTONE_TOLERANCE`), the worst combination of the other
        factors' cells shown and its step as `amount`; `base_level` findings, with the distance
        from 1 of the named base level, or else of the closest band, level, row or column, as
        `amount`; `bounds` findings, one per
        relativity beyond a bound, with the distance beyond it as `amount`. Along a numeric factor
        the cells are the bands cut at every lower edge of the factor and of its two-way sides.

    Raises
    ------
    TableError
        When a promised direction is not one of the three words.
    """
    directions, found = _directions(table, promises)
    for main in table.main_factors:
        if directions[main.name] != "none":
            found += _direction(table, main, directions[main.name])
    tolerance = 0.5 * 10.0**-table.rounding.relativity_decimals
    for factor in table.factors:
        found += _base(factor, tolerance)
    if bounds:
        found += _bounds(table, bounds)
    return found


def flattened(table: RatingTable, promises: dict[str, str] | None = None) -> list[Flattening]:
    """Promises kept by flattening: runs of two or more adjacent bands or levels of a promised
    factor whose relativities are equal after rounding.

    Directions are as for `audit` (each factor's `monotone`, overridden or added by `promises`).
    Along a factor the cells are those of `audit`'s direction check: bands cut at every lower edge
    of the factor and of its two-way sides, or levels in file order, each with the main effect x
    two-way relativities for every combination of the other factors' cells; a run is flat when
    every combination, rounded to `relativity_decimals`, is equal from cell to cell. A run inside one
    band of the factor (cut only by a two-way side) is not counted.

    Parameters
    ----------
    table : RatingTable
        The table.
    promises : dict of str to str, optional
        As for `audit` (a name that is no factor of the table is ignored here; `audit` reports it).

    Returns
    -------
    list of Flattening
        One per maximal run, in factor order then along the factor, naming the factor's bands or
        levels in the run.

    Raises
    ------
    TableError
        When a promised direction is not one of the three words.
    """
    directions, _ = _directions(table, promises)
    decimals = table.rounding.relativity_decimals
    found = []
    for main in table.main_factors:
        if directions[main.name] == "none":
            continue
        labels, main_index, combined, _others = _along(table, main)
        if len(labels) < 2:
            continue
        rounded = np.round(combined, decimals)
        flat = (rounded[1:] == rounded[:-1]).reshape(len(labels) - 1, -1).all(axis=1)
        start = 0
        for i in range(len(flat) + 1):
            if i < len(flat) and flat[i]:
                continue
            members = list(dict.fromkeys(int(k) for k in main_index[start : i + 1]))
            if len(members) > 1:
                shared = rounded[start].ravel()
                value = float(shared[0]) if np.all(shared == shared[0]) else None
                names = main.labels()
                kind = "bands" if isinstance(main, NumericFactor) else "levels"
                found.append(
                    Flattening(main.name, directions[main.name], kind, tuple(names[k] for k in members), value)
                )
            start = i + 1
    return found


def audit_path(
    path: str | os.PathLike[str],
    promises: dict[str, str] | None = None,
    bounds: dict[str, tuple[float | None, float | None]] | None = None,
) -> list[Violation]:
    """Audit the table folder at `path`; a folder that fails to load gives one violation saying why.

    Parameters
    ----------
    path : str or os.PathLike
        The rating-table folder (holding `table.json`).
    promises : dict of str to str, optional
        As for `audit`.
    bounds : dict of str to (float or None, float or None), optional
        As for `audit`.

    Returns
    -------
    list of Violation
        `audit`'s findings; or, when `rating_tables.load` refuses the folder, one violation
        carrying the TableError's check (`format`, `bands`, `relativity`, `file_path`, ...),
        factor, place, one-line message (naming the folder and file) and amount.
    """
    try:
        table = load(path)
    except TableError as e:
        return [Violation(e.check, e.factor, e.where, str(e), e.amount)]
    return audit(table, promises, bounds)


def _grid(
    main: MainFactor, sides: list[Cells]
) -> tuple[list[str], npt.NDArray[np.integer[Any]], list[npt.NDArray[np.integer[Any]]]]:
    """Cells along a factor fine enough for the main effect and every two-way side: their labels,
    the main factor's index for each and each side's index for each.

    A RatingTable gives a categorical factor's two-way sides levels and a numeric factor's bands.
    """
    if isinstance(main, CategoricalFactor):
        levels = np.arange(len(main.levels))
        level_sides = [side for side in sides if not isinstance(side, Bands)]
        assert len(level_sides) == len(sides)  # a categorical factor's sides are levels
        return list(main.levels), levels, [mapping_to_side(main, side)[levels] for side in level_sides]
    band_sides = [side for side in sides if isinstance(side, Bands)]
    assert len(band_sides) == len(sides)  # a numeric factor's sides are bands
    lows = np.unique(np.concatenate([main.lower, *(side.lower for side in band_sides)]))
    highs = np.append(lows[1:], np.inf)
    labels = band_labels(lows, highs)
    return labels, band_index(main.lower, lows), [band_index(side.lower, lows) for side in band_sides]


def _directions(table: RatingTable, promises: dict[str, str] | None) -> tuple[dict[str, str], list[Violation]]:
    """Each main factor's direction (its `monotone`, overridden or added by `promises`) and a
    `promise` violation for each promise on a factor the table lacks."""
    directions = {f.name: f.monotone for f in table.main_factors}
    found: list[Violation] = []
    for name, direction in (promises or {}).items():
        if direction not in MONOTONE:
            raise TableError(
                f"promises: direction {direction!r} for {name!r} must be one of {', '.join(MONOTONE)}", where=name
            )
        if name not in directions:
            found.append(
                Violation(
                    "promise",
                    name,
                    None,
                    f"factor {name!r}: a direction ({direction}) is "
                    "promised but the table has no such numeric or categorical factor",
                )
            )
        else:
            directions[name] = direction
    return directions, found


def _along(
    table: RatingTable, main: MainFactor
) -> tuple[list[str], npt.NDArray[np.integer[Any]], npt.NDArray[np.float64], list[tuple[str, list[str]]]]:
    """The relativity along a factor's cells (`_grid`): their labels, the main factor's index of
    each, the main effect x two-way relativities (axis 0 the cells, then one axis per two-way table
    holding the factor: the other factor's cells) and each such other factor's name and cell labels."""
    tables = [(f, f.of.index(main.name)) for f in table.interactions if main.name in f.of]
    sides = [f.a_cells if k == 0 else f.b_cells for f, k in tables]
    labels, main_index, side_index = _grid(main, sides)
    combined = main.relativity[main_index].reshape((-1,) + (1,) * len(tables))
    others: list[tuple[str, list[str]]] = []
    for n, ((inter, k), index) in enumerate(zip(tables, side_index)):
        matrix = inter.relativity if k == 0 else inter.relativity.T
        shape = [len(labels)] + [1] * len(tables)
        shape[n + 1] = matrix.shape[1]
        combined = combined * matrix[index].reshape(shape)
        other = inter.of[1 - k]
        others.append((other, cell_labels(inter.b_cells if k == 0 else inter.a_cells)))
    return labels, main_index, combined, others


def _direction(table: RatingTable, main: MainFactor, direction: str) -> list[Violation]:
    labels, _main_index, combined, others = _along(table, main)
    if len(labels) < 2:
        return []
    step = combined[1:] / combined[:-1] - 1.0
    wrong = -step if direction == "increasing" else step
    found = []
    for i in np.flatnonzero((wrong > MONOTONE_TOLERANCE).reshape(len(labels) - 1, -1).any(axis=1)):
        worst = np.unravel_index(int(np.argmax(wrong[i])), wrong[i].shape)
        context = "".join(f", {name}={cells[j]}" for (name, cells), j in zip(others, worst))
        count = int((wrong[i] > MONOTONE_TOLERANCE).sum())
        where = f"{labels[i]} to {labels[i + 1]}"
        before, after = combined[i][worst], combined[i + 1][worst]
        spread = f" ({count} combinations of the other factors' cells, worst shown)" if count > 1 else ""
        found.append(
            Violation(
                "monotone",
                main.name,
                where,
                f"factor {main.name!r}, {where}{context}: promised {direction}, the relativity "
                f"goes from {before:.6g} to {after:.6g}{spread}; relative step",
                float(wrong[i][worst]),
            )
        )
    return found


def _base(factor: Factor, tolerance: float) -> list[Violation]:
    deviation = np.abs(factor.relativity - 1.0)
    if isinstance(factor, InteractionFactor):
        found = []
        for axis, what in ((1, "row"), (0, "column")):
            worst = deviation.max(axis=axis)
            if worst.min() > tolerance:
                found.append(
                    Violation(
                        "base_level",
                        factor.name,
                        what,
                        f"interaction {factor.name!r}: no base {what} with every relativity at 1; "
                        "closest has a distance from 1",
                        float(worst.min()),
                    )
                )
        return found
    if isinstance(factor, CategoricalFactor) and factor.base is not None:
        i = factor.levels.index(factor.base)
        if deviation[i] > tolerance:
            return [
                Violation(
                    "base_level",
                    factor.name,
                    factor.base,
                    f"factor {factor.name!r}: base level {factor.base!r} has relativity "
                    f"{factor.relativity[i]:.6g}, not 1; distance",
                    float(deviation[i]),
                )
            ]
        return []
    if deviation.min() > tolerance:
        kind = "band" if isinstance(factor, NumericFactor) else "level"
        return [
            Violation(
                "base_level",
                factor.name,
                None,
                f"factor {factor.name!r}: no {kind} has relativity 1; the closest is at a distance",
                float(deviation.min()),
            )
        ]
    return []


def _bounds(table: RatingTable, bounds: dict[str, tuple[float | None, float | None]]) -> list[Violation]:
    names = {f.name for f in table.factors}
    found = [
        Violation("bounds", name, None, f"factor {name!r}: bounds are given but the table has no such factor")
        for name in bounds
        if name != "*" and name not in names
    ]
    for factor in table.factors:
        limits = bounds.get(factor.name, bounds.get("*"))
        if limits is None:
            continue
        low, high = limits
        labels, values = _bounded(factor)
        checks: tuple[
            tuple[float | None, Callable[[npt.NDArray[np.float64], float], npt.NDArray[np.float64]], str], ...
        ]
        checks = (
            (low, lambda v, x: x - v, "below the minimum"),
            (high, lambda v, x: v - x, "above the maximum"),
        )
        for limit, beyond, word in checks:
            if limit is None:
                continue
            excess = beyond(values, float(limit))
            for i in np.flatnonzero(excess > 0):
                found.append(
                    Violation(
                        "bounds",
                        factor.name,
                        labels[i],
                        f"factor {factor.name!r}, {labels[i]}: relativity {values[i]:.6g} is {word} {float(limit):.6g}",
                        float(excess[i]),
                    )
                )
    return found


def _bounded(factor: Factor) -> tuple[list[str], npt.NDArray[np.float64]]:
    """The labels and relativities the bounds apply to: every cell, band or level, and the missing row."""
    if isinstance(factor, InteractionFactor):
        return _cell_names(factor), factor.relativity.ravel()
    if factor.missing is None:
        return factor.labels(), factor.relativity
    return [*factor.labels(), MISSING_LABEL], np.append(factor.relativity, factor.missing.relativity)


def _cell_names(factor: InteractionFactor) -> list[str]:
    a, b = factor.of
    return [f"{a}={x}, {b}={y}" for x in cell_labels(factor.a_cells) for y in cell_labels(factor.b_cells)]
