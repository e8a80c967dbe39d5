"""`select`: an indicated table with the actuary's selections on top, rebalanced, audited and measured.

For each main factor with rules (premiumlab.tabulation.selections_file), in table order, the rules
apply in this order, each on the result of the one before:

1. `edges`: the factor is rebanded (the spec's edges, the table's own rounded to a step, or given);
   a new band's indicated relativity is the exposure-weighted geometric mean of the indicated
   relativities of the training rows it holds (`selection.banded_relativity`);
2. `keep_current`: the factor takes the current table's relativities;
3. `credibility`: r = r^Z x complement^(1 - Z), Z the table's credibility column, the complement the
   current relativity or 1;
4. `smooth`: an exposure-weighted moving average of the log relativities (numeric factors);
5. `cap`: r held within +-cap of the current relativity;
6. each `override`: one band or level set by hand.

The rules act on a factor's **effective** relativity, so that two tables whose two-way tables are
normalised differently compare band for band: n_b = main_b x m_b / (main_b0 x m_b0), where m_b is
the exposure-weighted geometric mean over the band's training rows of the product of the table's
two-way relativities on the factor (1 without any) and b0 the base band or level, which stays at 1
(an override of the base is refused). The current table's effective relativity is computed the same
way from its own main and two-way relativities (its main relativity at the band's lower edge, or
its level, when the band has no rows). After the rules the main relativity is n_b x main_b0 x m_b0 /
m_b, and the factor file's `current` column holds the current effect in the same terms, so that
relativity / current is the change of the band's effect. Each rule's
off-balance is the change it makes to the total pure premium of the training rows at the indicated
base rate: total after / total before - 1. At the end the relativities are rounded to
`relativity_decimals` (a capped value kept within its cap) and the base rate is solved so that the
total pure premium of the training rows meets the indicated table's target again.
"""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from premiumlab._core.errors import InputError
from premiumlab.tabulation.row_effects import effect_parts
from premiumlab.tabulation.selection import (
    banded_relativity,
    capped,
    credibility_weighted,
    rounded_edges,
    rounded_within,
    smoothed,
)
from premiumlab.tabulation.selections_file import FactorRules, Selections, read_selections
from rating_tables import MISSING_LABEL
from rating_tables.table import band_index

if TYPE_CHECKING:
    import pandas as pd

    from rating_tables.table import MainFactor, RatingTable

#: The selected table's fidelity.json format version (docs/rating-table.md, the selected table).
SELECTED_FIDELITY_VERSION = 1
#: The suffix of an indicated table's id, replaced by `.selected`.
INDICATED_SUFFIX = ".indicated"


@dataclass
class _Working:
    """One main factor while its rules apply: values per band or level, the missing row last when
    the factor has one (`has_missing`)."""

    factor: MainFactor
    relativity: np.ndarray
    indicated: np.ndarray
    exposure: np.ndarray
    credibility: np.ndarray | None
    current: np.ndarray | None
    base: int
    has_missing: bool

    @property
    def labels(self) -> list[str]:
        return self.factor.labels() + ([MISSING_LABEL] if self.has_missing else [])

    @property
    def kept(self) -> slice:
        """The bands or levels, the missing row left out."""
        return slice(0, self.relativity.size - int(self.has_missing))

    def on_base(self, values: np.ndarray) -> np.ndarray:
        return values / values[self.base]


def _row_bands(lower: np.ndarray, values: np.ndarray) -> np.ndarray:
    return band_index(lower, values).astype(np.intp)


def _base_band(factor: MainFactor) -> int:
    """The band or level at 1: a categorical's `base`, else the band nearest 1 (the largest exposure
    among equals)."""
    from rating_tables import CategoricalFactor

    if isinstance(factor, CategoricalFactor) and factor.base is not None:
        return factor.levels.index(factor.base)
    gap = np.abs(factor.relativity - 1.0)
    return int(np.lexsort((-factor.exposure, gap))[0])


def _working(factor: MainFactor) -> _Working:
    missing = factor.missing
    extra = (lambda v: [v]) if missing is not None else (lambda v: [])

    def column(name: str) -> np.ndarray | None:
        values = getattr(factor, name)
        return None if values is None else np.array([*values, *extra(getattr(missing, name, np.nan))], dtype=float)

    indicated = column("indicated")
    relativity = np.array([*factor.relativity, *extra(missing.relativity if missing else 1.0)], dtype=float)
    return _Working(
        factor=factor,
        relativity=relativity,
        indicated=relativity.copy() if indicated is None else np.where(np.isnan(indicated), relativity, indicated),
        exposure=np.array([*factor.exposure, *extra(missing.exposure if missing else 0.0)], dtype=float),
        credibility=column("credibility"),
        current=None,
        base=_base_band(factor),
        has_missing=missing is not None,
    )


def _factor_of(w: _Working, relativity: np.ndarray) -> MainFactor:
    """The rating-table factor of `w` with `relativity` (missing row last when there is one)."""
    from rating_tables import MissingRow

    n = w.kept.stop
    optional = {"indicated": w.indicated, "credibility": w.credibility, "current": w.current}
    missing = None
    if w.has_missing:
        missing = MissingRow(
            relativity=float(relativity[n]),
            exposure=float(w.exposure[n]),
            **{k: float(v[n]) for k, v in optional.items() if v is not None},
        )
    cut = {k: None if v is None else v[:n] for k, v in optional.items()}
    return dataclasses.replace(
        w.factor,
        relativity=relativity[:n],
        exposure=w.exposure[:n],
        missing=missing,
        indicated=cut["indicated"],
        credibility=cut["credibility"],
        current=cut["current"],
    )


# ------------------------------------------------------------------------------ effective relativities


def _row_cells(w: _Working, rows: _Rows) -> np.ndarray:
    """The band or level (the missing row's place last) of `w` that rates each training row."""
    from rating_tables.rate import row_cells

    return row_cells(w.factor, rows.frame[w.factor.name])


def _two_way_mean(w: _Working, cells: np.ndarray, rows: _Rows) -> np.ndarray:
    """m_b: the exposure-weighted geometric mean, over the training rows of each band or level of
    `w`, of the product of the indicated table's two-way relativities on the factor (1 without
    any, and for a band without rows)."""
    mean, weight = banded_relativity(cells, rows.indicated_two_way[w.factor.name], rows.exposure, w.relativity.size)
    return np.where(weight > 0, mean, 1.0)


def _current_effective(
    w: _Working, current: RatingTable, cells: np.ndarray, rows: _Rows
) -> tuple[np.ndarray, str | None]:
    """The current table's effective relativity of each band or level of `w` (missing row last):
    the exposure-weighted geometric mean over the band's training rows of the current main
    relativity times its two-way relativities on the factor; for a band without rows, the current
    main relativity at the band's lower edge (or level); and a note when the current table does
    not rate the factor or lacks a missing row."""
    from rating_tables import CategoricalFactor, InteractionFactor

    name = w.factor.name
    try:
        cur = current.factor(name)
        if isinstance(cur, InteractionFactor):
            raise KeyError(name)
    except KeyError:
        return np.ones(w.relativity.size), f"the current table does not rate '{name}': its current relativity is 1"
    if isinstance(w.factor, CategoricalFactor) != isinstance(cur, CategoricalFactor):
        raise InputError(f"--current: factor '{name}' is numeric in one table and categorical in the other")
    log_rows = rows.current[name] + rows.current_two_way[name]
    mean, weight = banded_relativity(cells, log_rows, rows.exposure, w.relativity.size)
    if isinstance(w.factor, CategoricalFactor) and isinstance(cur, CategoricalFactor):
        stand_in = cur.fallback or cur.base
        position = [cur.levels.index(lv) if lv in cur.levels else None for lv in w.factor.levels]
        if stand_in is None and None in position:
            level = w.factor.levels[position.index(None)]
            raise InputError(f"--current: factor '{name}' has no level '{level}' and no fallback or base level")
        alone = np.array([cur.relativity[cur.levels.index(stand_in) if i is None else i] for i in position])  # type: ignore[arg-type]
    else:
        assert not isinstance(cur, CategoricalFactor) and not isinstance(w.factor, CategoricalFactor)
        at_edges = np.where(np.isfinite(w.factor.lower), w.factor.lower, np.nextafter(w.factor.upper, -np.inf))
        alone = cur.relativity[band_index(cur.lower, at_edges)]
    note = None
    if w.has_missing:
        if cur.missing is None:
            alone = np.append(alone, np.nan)
            note = f"the current table has no missing row for '{name}': the missing row is left as indicated"
        else:
            alone = np.append(alone, cur.missing.relativity)
    return np.where(weight > 0, mean, alone), note


# ------------------------------------------------------------------------------------------ the rules


@dataclass(frozen=True)
class _Rows:
    """The training rows as the rules read them: per factor, the log main relativity and the log
    partner-averaged two-way part of its effect in the indicated and in the current table
    (`tabulation.row_effects.effect_parts`)."""

    frame: pd.DataFrame
    exposure: np.ndarray
    values: dict[str, np.ndarray]
    indicated: dict[str, np.ndarray]
    indicated_two_way: dict[str, np.ndarray]
    current: dict[str, np.ndarray]
    current_two_way: dict[str, np.ndarray]


def _reband(w: _Working, rules: FactorRules, spec_edges: tuple[float, ...] | None, rows: _Rows) -> tuple[_Working, str]:
    from rating_tables import NumericFactor

    name = w.factor.name
    if not isinstance(w.factor, NumericFactor):
        raise InputError(
            f"{rules.source}: key 'factor.{name}.edges': '{name}' is categorical; edges apply to numeric factors"
        )
    if rules.edges == "spec":
        if not spec_edges:
            raise InputError(
                f"{rules.source}: key 'factor.{name}.edges' = \"spec\": the run's spec gives '{name}' no band edges"
            )
        interior, how = np.array(spec_edges, dtype=float), "the spec's edges"
    elif rules.edges == "found":
        interior = w.factor.lower[1:]
        how = "the table's own edges"
        if rules.round_edges_to is not None:
            interior = rounded_edges(interior, rules.round_edges_to)
            how += f" rounded to multiples of {rules.round_edges_to:g}"
    else:
        assert isinstance(rules.edges, tuple)
        interior, how = np.unique(np.array(rules.edges, dtype=float)), "edges given"
    lower = np.array([-np.inf, *interior])
    upper = np.array([*interior, np.inf])
    values = rows.values[name]
    known = ~np.isnan(values)
    band = _row_bands(lower, values)[known]
    log_ind = rows.indicated[name][known]
    relativity, exposure = banded_relativity(band, log_ind, rows.exposure[known], lower.size)
    if np.isnan(relativity).any():
        empty = int(np.flatnonzero(np.isnan(relativity))[0])
        raise InputError(
            f"{rules.source}: key 'factor.{name}.edges': the band [{lower[empty]:g}, {upper[empty]:g}) holds no training "
            "exposure; choose edges that the book fills"
        )
    old_band = _row_bands(w.factor.lower, values)[known]
    in_old_base = old_band == w.base
    base = int(
        np.argmax(np.bincount(band[in_old_base], weights=rows.exposure[known][in_old_base], minlength=lower.size))
    )
    factor = dataclasses.replace(
        w.factor, lower=lower, upper=upper, relativity=relativity, exposure=exposure, indicated=None, credibility=None
    )
    tail = slice(w.kept.stop, None)
    rebanded = _Working(
        factor=factor,
        relativity=np.concatenate([relativity / relativity[base], w.relativity[tail]]),
        indicated=np.concatenate([relativity / relativity[base], w.indicated[tail]]),
        exposure=np.concatenate([exposure, w.exposure[tail]]),
        credibility=None,
        current=None,
        base=base,
        has_missing=w.has_missing,
    )
    return (
        rebanded,
        f"{lower.size} bands from {how}; each band's indicated relativity is the exposure-weighted geometric mean over its training rows",
    )


def _rule_steps(
    w: _Working, rules: FactorRules, start: np.ndarray, current_on_base: np.ndarray | None
) -> list[tuple[str, str, np.ndarray]]:
    """(rule, detail, effective relativities on the base after it) for rules 2 to 6 of the module
    docstring, in order, from the indicated effective relativities `start`."""
    from rating_tables import NumericFactor

    name = w.factor.name
    steps: list[tuple[str, str, np.ndarray]] = []
    r = start.copy()
    known_current = None if current_on_base is None else ~np.isnan(current_on_base)
    if rules.keep_current:
        assert current_on_base is not None and known_current is not None
        r = np.where(known_current, current_on_base, r)
        steps.append(("keep_current", "the factor keeps the current table's relativities", r.copy()))
    if rules.credibility is not None:
        if w.credibility is None:
            raise InputError(
                f"{rules.source}: key 'factor.{name}.credibility': the table has no credibility for '{name}' "
                "(a rebanded factor has none); leave credibility out for it"
            )
        z = np.where(np.isnan(w.credibility), 1.0, w.credibility)
        if rules.credibility == "current":
            assert current_on_base is not None and known_current is not None
            complement = np.where(known_current, current_on_base, r)
        else:
            complement = np.ones_like(r)
        r = credibility_weighted(r, complement, z)
        steps.append(
            (
                "credibility",
                f"weighted r^Z x {'current' if rules.credibility == 'current' else '1'}^(1 - Z), Z the table's credibility",
                r.copy(),
            )
        )
    if rules.smooth is not None:
        if not isinstance(w.factor, NumericFactor):
            raise InputError(
                f"{rules.source}: key 'factor.{name}.smooth': '{name}' is categorical; smoothing applies to bands"
            )
        k = w.kept
        r[k] = smoothed(r[k], w.exposure[k], rules.smooth)
        r[k] = r[k] / r[w.base]
        steps.append(
            ("smooth", f"exposure-weighted moving average of log relativities over {rules.smooth} bands", r.copy())
        )
    if rules.cap is not None:
        assert current_on_base is not None and known_current is not None
        r = np.where(known_current, capped(r, np.where(known_current, current_on_base, 1.0), rules.cap), r)
        steps.append(("cap", f"within +-{rules.cap:.0%} of the current relativity", r.copy()))
    labels = w.labels
    for o in rules.overrides:
        if o.at not in labels:
            raise InputError(
                f"{rules.source}: key 'factor.{name}.override': '{o.at}' is no band or level of '{name}' "
                f"(its bands or levels: {', '.join(labels[:8])}{', ...' if len(labels) > 8 else ''})"
            )
        i = labels.index(o.at)
        if i == w.base:
            raise InputError(
                f"{rules.source}: key 'factor.{name}.override': '{o.at}' is the base of '{name}', which stays at 1; "
                "move the other bands instead"
            )
        r[i] = o.relativity
        steps.append((f"override {o.at}", f"{o.at} set to {o.relativity:g}: {o.reason}", r.copy()))
    return steps


# --------------------------------------------------------------------------------------------- driver


def _selected_id(indicated_id: str) -> str:
    stem = indicated_id[: -len(INDICATED_SUFFIX)] if indicated_id.endswith(INDICATED_SUFFIX) else indicated_id
    return f"{stem}.selected"


def _replace_factor(table: RatingTable, factor: MainFactor) -> RatingTable:
    return dataclasses.replace(table, factors=tuple(factor if f.name == factor.name else f for f in table.factors))


def _check_names(selections: Selections, table: RatingTable, current: RatingTable | None) -> None:
    mains = [f.name for f in table.main_factors]
    for rules in selections.factors:
        if rules.factor not in mains:
            raise InputError(
                f"{selections.path}: key 'factor.{rules.factor}': the table has no factor '{rules.factor}' "
                f"(its factors: {', '.join(mains)})"
            )
    needing = [r.factor for r in (selections.every, *selections.factors) if r is not None and r.needs_current]
    if needing and current is None:
        where = "every_factor" if needing[0] == "*" else f"factor.{needing[0]}"
        raise InputError(
            f"{selections.path}: key '{where}' compares with the current table (cap, credibility = \"current\" "
            "or keep_current): give it with --current"
        )


def _changed(before: np.ndarray, after: np.ndarray, labels: list[str]) -> list[str]:
    return [label for label, a, b in zip(labels, before, after) if abs(b - a) > 1e-12 * abs(a)]


def select(
    table_dir: str | Path,
    selections_path: str | Path,
    run_dir: str | Path,
    out: str | Path,
    current: str | Path | None = None,
    force: bool = False,
    book: str | Path | None = None,
) -> dict[str, Any]:
    """Write the selected table OUT/ (table.json, factors/*.csv, fidelity.json, exhibit.xlsx) from an
    indicated table, a selections file and the run the table was made from.

    Parameters
    ----------
    table_dir : str or Path
        The indicated table (`tabulate`).
    selections_path : str or Path
        The selections file (TOML, docs/commands.md).
    run_dir : str or Path
        The run the table was made from: its training rows weigh the rebanding, the current
        relativities and the off-balances, its holdout rows measure the fidelity.
    out : str or Path
        The selected table's folder, written atomically.
    current : str or Path or None
        The table in force, needed by `cap`, `keep_current` and `credibility = "current"`; when
        given, every main factor's `current` column is filled.
    force : bool
        Replace an existing `out`.
    book : str or Path or None
        The run's book at another path (its sha256 must match run.json's).

    Returns
    -------
    dict
        What OUT/fidelity.json holds (docs/rating-table.md, the selected table), with `table` (the
        folder) and `seconds`.

    Raises
    ------
    InputError
        A bad selections file, a factor, band or level it names that the table lacks, a rule that
        needs the current table without one, a band without training exposure, or an output that
        is or holds an input.
    """
    import rating_tables
    from premiumlab._core.jsonio import read_json, write_json
    from premiumlab._core.outputs import atomic_output
    from premiumlab.runs.rundir import open_run
    from premiumlab.tabulation.from_run import GROUPS_CSV, rating_frame, reread_book, table_scores
    from rating_tables import NumericFactor

    started = time.perf_counter()
    indicated = rating_tables.load(table_dir)
    if indicated.stage != "indicated":
        raise InputError(f"{table_dir}: table.json: stage is '{indicated.stage}'; select works on an indicated table")
    selections = read_selections(selections_path)
    current_table = None if current is None else rating_tables.load(current)
    _check_names(selections, indicated, current_table)
    run = open_run(run_dir)
    spec = run.spec
    loaded = reread_book(run, book)
    train = np.flatnonzero(~loaded.holdout)
    frame = rating_frame(loaded, spec, train)
    expo = spec.columns.exposure
    values = {f.name: _numeric(frame, f.name) for f in indicated.main_factors if isinstance(f, NumericFactor)}
    exposure = loaded.exposure[train]
    indicated_main, indicated_two_way = effect_parts(indicated, frame, exposure)
    current_main, current_two_way = ({}, {}) if current_table is None else effect_parts(current_table, frame, exposure)
    rows = _Rows(
        frame=frame,
        exposure=exposure,
        values=values,
        indicated=indicated_main,
        indicated_two_way=indicated_two_way,
        current=current_main,
        current_two_way=current_two_way,
    )
    spec_edges = {f.name: f.bands for f in spec.factors}

    def total(t: RatingTable) -> float:
        return float(rating_tables.pure_premium(t, frame, expo).sum())

    table = indicated
    records: list[dict[str, Any]] = []
    notes: list[str] = []
    limits: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for factor in indicated.main_factors:
        rules = selections.rules_for(factor.name)
        w = _working(factor)
        if rules is not None and rules.edges is not None:
            before = total(table)
            w, detail = _reband(w, rules, spec_edges.get(factor.name), rows)
            table = _replace_factor(table, _factor_of(w, w.relativity))
            records.append(
                _record(
                    factor.name,
                    "edges",
                    detail,
                    rules.reason("edges"),
                    w.labels[: w.kept.stop],
                    total(table) / before - 1,
                )
            )
        cells = _row_cells(w, rows)
        m = _two_way_mean(w, cells, rows)
        scale = w.relativity[w.base] * m[w.base]  # effective relativity n = main x m / scale; n = 1 at the base
        current_on_base = None
        if current_table is not None:
            effective, note = _current_effective(w, current_table, cells, rows)
            notes += [note] if note else []
            current_on_base = effective / effective[w.base]
            w.current = current_on_base * scale / m  # the main relativity giving the current effect here
            table = _replace_factor(table, _factor_of(w, w.relativity))
        if rules is None:
            continue
        previous = w.relativity
        for rule, detail, effect in _rule_steps(w, rules, w.relativity * m / scale, current_on_base):
            after = effect * scale / m
            before = total(table)
            table = _replace_factor(table, _factor_of(w, after))
            reason = (
                rules.reason(rule)
                if rule in dict(rules.reasons)
                else next(o.reason for o in rules.overrides if rule == f"override {o.at}")
            )
            records.append(
                _record(
                    factor.name, rule, detail, reason, _changed(previous, after, w.labels), total(table) / before - 1
                )
            )
            previous = after
        w.relativity = previous
        if rules.cap is not None and current_on_base is not None:
            known = ~np.isnan(current_on_base)
            known[[w.labels.index(o.at) for o in rules.overrides]] = False  # an override is not capped
            limits[factor.name] = (
                np.where(known, current_on_base * (1 - rules.cap) * scale / m, -np.inf),
                np.where(known, current_on_base * (1 + rules.cap) * scale / m, np.inf),
            )
    unrounded = table
    decimals = indicated.rounding.relativity_decimals
    for factor in unrounded.main_factors:
        w = _working(factor)
        low, high = limits.get(factor.name, (np.full(w.relativity.size, -np.inf), np.full(w.relativity.size, np.inf)))
        w.current = (
            None
            if factor.current is None
            else np.array([*factor.current, *([factor.missing.current] if factor.missing else [])])
        )
        table = _replace_factor(table, _factor_of(w, rounded_within(w.relativity, low, high, decimals)))
    target = indicated.target.get("total_pure_premium", total(indicated))
    at_indicated_base = total(table)
    selected, report = rating_tables.solve_base_rate(
        dataclasses.replace(
            table,
            table_id=_selected_id(indicated.table_id),
            stage="selected",
            selections=tuple(records),
            provenance={**indicated.provenance, "indicated_table_id": indicated.table_id},
        ),
        frame,
        expo,
        target,
    )
    promises = {f.name: f.monotone for f in spec.factors if f.monotone != "none"}
    broken = [
        {
            "violation": str(v),
            "factor": v.factor,
            "selections": [r["rule"] for r in records if r["factor"] == v.factor],
        }
        for v in rating_tables.audit(selected, promises=promises)
    ]
    held = np.flatnonzero(loaded.holdout) if loaded.holdout.any() else train
    held_frame = rating_frame(loaded, spec, held)
    indicated_fidelity_path = Path(table_dir) / "fidelity.json"
    indicated_fidelity = read_json(indicated_fidelity_path)["fidelity"] if indicated_fidelity_path.is_file() else None
    power = indicated_fidelity["tweedie_power"] if indicated_fidelity else 1.5
    summary = {
        "format": "premiumlab.selected-fidelity",
        "version": SELECTED_FIDELITY_VERSION,
        "table_id": selected.table_id,
        "indicated_table_id": indicated.table_id,
        "current_table_id": None if current_table is None else current_table.table_id,
        "selections": list(records),
        "notes": notes,
        "rate_level": {
            "target_total_pure_premium": target,
            "total_at_indicated_base_rate": at_indicated_base,
            "off_balance": at_indicated_base / target - 1.0,
            "rounding_off_balance": at_indicated_base / total(unrounded) - 1.0,
            "indicated_base_rate": indicated.base_rate,
            "base_rate": selected.base_rate,
            "base_rate_correction": selected.base_rate / indicated.base_rate,
            "minimum_premium": report.get("minimum_premium"),
        },
        "audit": {"promises": promises, "violations": broken},
        "fidelity": {
            "selected": table_scores(selected, held_frame, spec, loaded, held, power),
            "indicated": table_scores(indicated, held_frame, spec, loaded, held, power),
            "indicated_table_fidelity": indicated_fidelity,
        },
        "cautions": list(selected.cautions),
    }
    inputs = (table_dir, selections_path, run_dir, loaded.path, *(() if current is None else (current,)))
    with atomic_output(out, force=force, inputs=inputs) as tmp:
        rating_tables.save(selected, tmp)
        write_json(tmp / "fidelity.json", summary)
        groups = Path(table_dir) / GROUPS_CSV
        if groups.is_file():
            (tmp / GROUPS_CSV).write_bytes(groups.read_bytes())
        rating_tables.write_exhibit(selected, tmp / "exhibit.xlsx")
    return {**summary, "table": str(out), "seconds": time.perf_counter() - started}


def _record(
    factor: str, rule: str, detail: str, reason: str, applies_to: list[str], off_balance: float
) -> dict[str, Any]:
    """One selection as table.json's `selections` lists it."""
    return {
        "factor": factor,
        "rule": rule,
        "detail": detail,
        "reason": reason,
        "applies_to": applies_to,
        "off_balance": off_balance,
    }


def _numeric(frame: pd.DataFrame, name: str) -> np.ndarray:
    import pandas as pd

    return pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float)
