"""The pricing spec: a TOML file read into validated, typed objects.

Every key has a documented default (the dataclasses below, DEVELOPERS.md); unknown keys, wrong
types and impossible options are refused with an `InputError` naming the file and the dotted key
(read through `premiumlab._core.toml_schema`). The [gbm] section is read into
`premiumlab.book.gbm_options.GbmOptions`, the [loadings] section into the table format's
`rating_tables.Loadings`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from premiumlab._core.defaults import SEED
from premiumlab._core.toml_schema import TomlTable, read_toml
from premiumlab.book.gbm_options import MONOTONE_METHODS, GbmOptions
from rating_tables import MISSING_LABEL, Loadings
from rating_tables.monotone import Monotone

MONOTONE = tuple(m.value for m in Monotone)
#: Bounds of spec numbers checked when the spec is read (docs/spec.md): a seed LightGBM takes (a
#: 32-bit signed integer), LightGBM threads (far above any machine's cores; 100,000 crashed it), and
#: decimals the rating table accepts.
MAX_SEED = 2**31 - 1
MAX_THREADS = 256
MAX_DECIMALS = 12
FACTOR_TYPES = ("numeric", "categorical")
#: What a missing value of a factor is: its own level or band ("level"), or an error ("refuse").
MISSING_RULES = ("level", "refuse")

#: Factor names refused by default: characteristics that rating law in many places forbids.
#: A jurisdiction sets its own list in `[compliance] prohibited`.
DEFAULT_PROHIBITED = (
    "gender",
    "sex",
    "race",
    "ethnicity",
    "ethnic_origin",
    "colour",
    "color",
    "religion",
    "nationality",
    "national_origin",
    "disability",
    "sexual_orientation",
    "genetic",
    "marital_status",
)


@dataclass(frozen=True)
class Columns:
    """Names of the book's columns that carry exposure, claims and identifiers."""

    exposure: str
    claim_count: str
    claim_amount: str | None = None
    policy_id: str | None = None
    period: str | None = None
    current_premium: str | None = None

    def used(self) -> list[str]:
        """Every column name the spec maps, in a fixed order."""
        names = [self.exposure, self.claim_count, self.claim_amount, self.policy_id, self.period, self.current_premium]
        return [n for n in names if n is not None]


@dataclass(frozen=True)
class Factor:
    """A rating factor: `numeric` (banded by `bands` edges, or by `n_bands` exposure quantiles) or
    `categorical` (levels read as strings; `levels` gives an order, which a monotone promise needs).
    `missing`: "level" makes a missing value its own level or band (`MISSING_LABEL`), "refuse" an
    error."""

    name: str
    type: str
    monotone: str = "none"
    bands: tuple[float, ...] | None = None
    n_bands: int = 8
    levels: tuple[str, ...] | None = None
    base: str | None = None
    fallback: str | None = None
    missing: str = "level"

    @property
    def direction(self) -> int:
        """+1 for an increasing promise, -1 for decreasing, 0 for none."""
        return Monotone(self.monotone).sign

    @property
    def ordered(self) -> bool:
        """True when the factor's values have an order (numeric, or categorical with `levels`)."""
        return self.type == "numeric" or self.levels is not None


@dataclass(frozen=True)
class Split:
    """Holdout split: a policy is held out when hash(seed, policy) < holdout.

    `holdout = "latest_period"` in the spec holds out the rows of the latest period instead (an
    out-of-time holdout): then `out_of_time` is true and the share `holdout` is 0.
    """

    holdout: float = 0.2
    seed: int = SEED
    out_of_time: bool = False


@dataclass(frozen=True)
class GlmOptions:
    """GLM baseline options. engine: auto | cells | rows; tweedie_power: "auto" or a number in (1, 2);
    penalty: credibility | none (docs/spec.md, [glm])."""

    engine: str = "auto"
    tweedie_power: float | str = "auto"
    penalty: str = "credibility"


@dataclass(frozen=True)
class TableOptions:
    """Rating-table options: identity, banding limits, interactions and rounding."""

    table_id: str = "draft-1"
    effective_date: str = "2027-01-01"
    exposure_unit: str = "policy-year"
    max_bands: int = 8
    min_band_exposure: float = 0.02
    interactions: tuple[tuple[str, str], ...] = ()
    sample: int = 20000
    grid_points: int = 100
    grid_rows: int = 1_000_000
    relativity_decimals: int = 3
    premium_decimals: int = 2
    target: str = "experience"
    overall_change: float = 0.0


@dataclass(frozen=True)
class Compliance:
    """Factors that must not be used in rating (names compared case-insensitively)."""

    prohibited: tuple[str, ...] = DEFAULT_PROHIBITED
    jurisdiction: str = ""


@dataclass(frozen=True)
class Experience:
    """Experience adjustments made before modelling (premiumlab.experience); without any, amounts are
    taken as given (ultimate, trended, uncapped).

    large_loss_cap (none): cap per claim (with `claims_file`) or per row total (one policy in one
    period), in the money of the future policy period; the excess is spread back as a flat load.
    excess_load_history (none: measured on the training rows): the excess over capped losses from a
    longer history, as a ratio (0.08 = 8 %).
    claims_file (none): CSV or Parquet of single claims, relative to the spec file, with the book's
    policy_id column (and period column, if named), the amount column `claims_amount_column`
    (default: the book's claim_amount name) and the flag column `catastrophe_column` (optional,
    true/false or 1/0): flagged claims leave the amounts and counts and come back as a flat load.
    development ({}): age-to-ultimate factors by period, a table or a CSV (period,factor) relative
    to the spec file; development_applies_to_counts (false): develop counts with the same factors.
    trend ({}): annual `frequency` and `severity` rates, from each period's midpoint (a year label
    "2024" -> its middle; others from `period_midpoints`) to `future_midpoint` (default: the
    table's effective date plus half of `term_years`, 1.0).
    period_control (false): fit the period as a control factor in the GLMs (never tabled).
    """

    large_loss_cap: float | None = None
    excess_load_history: float | None = None
    claims_file: str | None = None
    claims_amount_column: str | None = None
    catastrophe_column: str | None = None
    development: dict[str, float] | str = field(default_factory=dict)
    development_applies_to_counts: bool = False
    trend: dict[str, float] = field(default_factory=dict)
    future_midpoint: str | None = None
    term_years: float = 1.0
    period_midpoints: dict[str, str] = field(default_factory=dict)
    period_control: bool = False

    @property
    def configured(self) -> bool:
        """True when any adjustment of amounts or counts is set."""
        return bool(self.large_loss_cap or self.development or self.trend or self.catastrophe_column)


@dataclass(frozen=True)
class Spec:
    """The whole pricing spec. `source` is the file it came from (for messages)."""

    columns: Columns
    factors: tuple[Factor, ...]
    split: Split = Split()
    glm: GlmOptions = GlmOptions()
    gbm: GbmOptions = field(default_factory=GbmOptions)
    table: TableOptions = TableOptions()
    loadings: Loadings = field(default_factory=Loadings)
    compliance: Compliance = Compliance()
    experience: Experience = Experience()
    source: str = "spec"
    raw: dict[str, Any] = field(default_factory=dict, compare=False)

    def factor(self, name: str) -> Factor:
        """The factor called `name`."""
        for f in self.factors:
            if f.name == name:
                return f
        raise KeyError(name)

    @property
    def factor_names(self) -> list[str]:
        """Factor names in spec order."""
        return [f.name for f in self.factors]


# --------------------------------------------------------------------------------------------
# parsing

SECTIONS = ("columns", "factors", "split", "glm", "gbm", "table", "loadings", "compliance", "experience")
FACTOR_KEYS = ("type", "monotone", "bands", "n_bands", "levels", "base", "fallback", "missing")

#: How one key of a section is read: (its table, the key) -> the value.
Read = Callable[[TomlTable, str], Any]


def _section(doc: TomlTable, name: str, reads: dict[str, Read]) -> dict[str, Any]:
    """The keys of section `name` that the spec gives (file order), each read by its function; a key
    not in `reads` is refused first. Absent keys take the defaults of the section's dataclass."""
    t = doc.table(name, {})
    t.allow(reads)
    t.refuse_unknown()
    return {k: reads[k](t, k) for k in t.all_keys()}


def _parse_columns(doc: TomlTable) -> Columns:
    if not doc.has("columns"):
        raise doc.error("columns", "is missing: the spec must name the exposure and claim_count columns")
    t = doc.table("columns")
    t.allow(("exposure", "claim_count", "claim_amount", "policy_id", "period", "current_premium"))
    t.refuse_unknown()
    for required in ("exposure", "claim_count"):
        t.value(required)
    values = {k: t.string(k) for k in t.all_keys()}
    seen: dict[str, str] = {}
    for k, v in values.items():
        if v in seen:
            raise t.error(k, f"names column '{v}', already used by columns.{seen[v]}")
        seen[v] = k
    return Columns(**values)


def _parse_factor(factors: TomlTable, name: str) -> Factor:
    t = factors.table(name)
    t.allow(FACTOR_KEYS)
    t.refuse_unknown()
    if not t.has("type"):
        raise t.error("type", "is required (numeric or categorical)")
    ftype = t.string("type", choices=FACTOR_TYPES)
    monotone = t.string("monotone", Monotone.NONE.value, choices=MONOTONE)
    bands = levels = None
    n_bands = 8
    if ftype == "numeric":
        for bad in ("levels", "fallback"):
            if t.has(bad):
                raise t.error(bad, "applies only to categorical factors")
        if t.has("bands"):
            bands = t.numbers("bands", what="a list of band edges")
            if not bands:
                raise t.error("bands", "must not be empty")
            for i in range(1, len(bands)):
                if bands[i] <= bands[i - 1]:
                    raise t.error("bands", f"must be strictly increasing: {bands[i - 1]:g} then {bands[i]:g}")
        if t.has("n_bands"):
            if bands is not None:
                raise t.error("n_bands", "conflicts with bands: give one")
            n_bands = t.integer("n_bands", low=2)
    else:
        if t.has("bands") or t.has("n_bands"):
            raise t.error("bands", "applies only to numeric factors")
        if t.has("levels"):
            levels = t.strings("levels", what="a list of level names", nonempty=True, distinct="level")
            if len(levels) < 2:
                raise t.error("levels", "needs at least two levels")
            if MISSING_LABEL in levels:
                raise t.error("levels", f"lists '{MISSING_LABEL}', the label of missing values; rename that level")
        if monotone != Monotone.NONE and levels is None:
            raise t.error(
                "monotone",
                f": a monotone promise needs an order, but '{name}' is an unordered "
                f"categorical; give its `levels` in order",
            )
    named = {}
    for key in ("base", "fallback"):
        named[key] = None if t.value(key, None) is None else t.string(key)
        if named[key] == MISSING_LABEL:
            raise t.error(key, f"is '{MISSING_LABEL}', the missing values' level: choose a level with a value")
        if named[key] is not None and levels is not None and named[key] not in levels:
            raise t.error(key, f"'{named[key]}' is not one of its levels")
    missing = t.string("missing", "level", choices=MISSING_RULES)
    return Factor(
        name=name,
        type=ftype,
        monotone=monotone,
        bands=bands,
        n_bands=n_bands,
        levels=levels,
        missing=missing,
        **named,
    )


def _power(t: TomlTable, key: str, word: str) -> float | str:
    """A Tweedie power in (1, 2), or the word `word`."""
    if isinstance(t.value(key), str):
        return t.string(key, choices=(word,))
    return t.number(key, low=1.0, high=2.0, low_open=True, high_open=True)


def _interactions(t: TomlTable, key: str) -> tuple[tuple[str, str], ...]:
    pairs = []
    for i, pair in enumerate(t.array(key, what="a list of factor pairs")):
        if not (isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str) for p in pair)):
            raise t.error(f"{key}[{i}]", f"must be a pair of factor names, got {pair!r}")
        if pair[0] == pair[1]:
            raise t.error(f"{key}[{i}]", f"pairs factor '{pair[0]}' with itself")
        pairs.append((pair[0], pair[1]))
    return tuple(pairs)


def _rates_by_period(t: TomlTable, key: str) -> dict[str, float] | str:
    if isinstance(t.value(key), str):
        return t.string(key)
    rates = t.table(key, what="a table of period = factor, or a CSV file name")
    return {period: rates.number(period, low=0.0, low_open=True) for period in rates.all_keys()}


def _trend(t: TomlTable, key: str) -> dict[str, float]:
    rates = t.table(key, what="a table with frequency and/or severity")
    rates.allow(("frequency", "severity"))
    rates.refuse_unknown()
    return {k: rates.number(k, low=-0.5, high=1.0) for k in rates.all_keys()}


def _dates_by_period(t: TomlTable, key: str) -> dict[str, str]:
    dates = t.table(key, what="a table of period = date")
    return {period: dates.date(period) for period in dates.all_keys()}


def _holdout(t: TomlTable, key: str) -> float | str:
    value = t.value(key)
    if isinstance(value, str) and value != "latest_period":
        raise t.error(key, f"must be a number in [0, 1) or 'latest_period', got {value!r}")
    if isinstance(value, str):
        return value
    return t.number(key, low=0.0, high=1.0, high_open=True)


def _boolean(t: TomlTable, key: str) -> bool:
    return t.boolean(key)


def _text(t: TomlTable, key: str) -> str:
    return t.string(key)


def _parse_experience(doc: TomlTable, columns: Columns) -> Experience:
    given = _section(
        doc,
        "experience",
        {
            "large_loss_cap": lambda t, k: t.number(k, low=0.0, low_open=True),
            "excess_load_history": lambda t, k: t.number(k, low=0.0, high=10.0),
            "claims_file": _text,
            "claims_amount_column": _text,
            "catastrophe_column": _text,
            "development": _rates_by_period,
            "development_applies_to_counts": _boolean,
            "trend": _trend,
            "future_midpoint": lambda t, k: t.date(k),
            "term_years": lambda t, k: t.number(k, low=0.0, high=10.0, low_open=True),
            "period_midpoints": _dates_by_period,
            "period_control": _boolean,
        },
    )
    e = Experience(**given)
    needs = [  # (key, what it needs, whether that is there)
        ("large_loss_cap", "columns.claim_amount", columns.claim_amount is not None),
        ("excess_load_history", "experience.large_loss_cap", e.large_loss_cap is not None),
        (
            "claims_file",
            "columns.policy_id and columns.claim_amount",
            columns.policy_id is not None and columns.claim_amount is not None,
        ),
        (
            "claims_file",
            "experience.large_loss_cap or experience.catastrophe_column",
            e.large_loss_cap is not None or e.catastrophe_column is not None,
        ),
        ("claims_amount_column", "experience.claims_file", e.claims_file is not None),
        ("catastrophe_column", "experience.claims_file", e.claims_file is not None),
        ("development", "columns.period", columns.period is not None),
        ("development_applies_to_counts", "experience.development", bool(e.development)),
        ("trend", "columns.period", columns.period is not None),
        ("future_midpoint", "experience.trend", bool(e.trend)),
        ("term_years", "experience.trend", bool(e.trend)),
        ("period_midpoints", "experience.trend", bool(e.trend)),
        ("period_control", "columns.period", columns.period is not None),
    ]
    for key, what, there in needs:
        if key in given and not there:
            raise doc.error(f"experience.{key}", f"needs {what}")
    return e


def _rows_or_auto(t: TomlTable, key: str) -> float | None:
    """A number of rows >= 0, or the word "auto" (None)."""
    if isinstance(t.value(key), str):
        t.string(key, choices=("auto",))
        return None
    return t.number(key, low=0.0)


def _parse_gbm(doc: TomlTable, seed: int) -> GbmOptions:
    """The [gbm] section; the seed is the split's, the word "glm" for tweedie_power is None, the
    word "auto" for cat_smooth and cat_l2 is None."""
    given = _section(
        doc,
        "gbm",
        {
            "folds": lambda t, k: t.integer(k, low=2),
            "max_settings": lambda t, k: t.integer(k, low=1),
            "threads": lambda t, k: t.integer(k, low=1, high=MAX_THREADS),
            "max_rounds": lambda t, k: t.integer(k, low=1),
            "early_stopping_rounds": lambda t, k: t.integer(k, low=1),
            "monotone_method": lambda t, k: t.string(k, choices=MONOTONE_METHODS),
            "constrain_severity": _boolean,
            "tweedie_power": lambda t, k: _power(t, k, "glm"),
            "cat_smooth": _rows_or_auto,
            "cat_l2": _rows_or_auto,
            "min_data_per_group": lambda t, k: t.integer(k, low=1),
            "max_cat_threshold": lambda t, k: t.integer(k, low=1),
            "cluster_rows": lambda t, k: t.integer(k, low=1),
            "search_rows": lambda t, k: t.integer(k, low=1),
        },
    )
    if "threads" in given:
        given["num_threads"] = given.pop("threads")
    if given.get("tweedie_power") == "glm":
        given["tweedie_power"] = None
    return GbmOptions(seed=seed, **given)


def _parse_loadings(doc: TomlTable) -> Loadings:
    given = _section(
        doc,
        "loadings",
        {
            "lae_ratio": lambda t, k: t.number(k, low=0.0, high=5.0),
            "fixed_expense": lambda t, k: t.number(k, low=0.0),
            "variable_expense": lambda t, k: t.number(k, low=0.0, high=1.0, high_open=True),
            "profit": lambda t, k: t.number(k, low=0.0, high=1.0, high_open=True),
            "minimum_premium": lambda t, k: t.number(k, low=0.0),
        },
    )
    variable_and_profit = sum(given.get(k, getattr(Loadings, k)) for k in ("variable_expense", "profit"))
    if variable_and_profit >= 1.0:
        raise doc.error("loadings", f": variable_expense + profit must be below 1, got {variable_and_profit:g}")
    return Loadings(**given)


def parse_spec(doc: dict, source: str = "spec") -> Spec:
    """Validate a parsed TOML document and build the `Spec`.

    Parameters
    ----------
    doc : dict
        The TOML document.
    source : str
        The file it came from, for messages.

    Returns
    -------
    Spec
        The validated spec; bad input raises `InputError` naming the file and the dotted key.
    """
    top = TomlTable(doc, source)
    top.allow(SECTIONS)
    top.refuse_unknown()
    columns = _parse_columns(top)
    factors_table = top.table("factors", {})
    if not factors_table.all_keys():
        raise top.error("factors", "is missing: the spec needs at least one rating factor")
    factors = tuple(_parse_factor(factors_table, name) for name in factors_table.all_keys())
    for f in factors:
        if f.name in columns.used():
            raise factors_table.error(f.name, f": '{f.name}' is also a column of [columns]")

    compliance = Compliance(
        **_section(
            top,
            "compliance",
            {
                "prohibited": lambda t, k: t.strings(k, what="a list of factor names"),
                "jurisdiction": _text,
            },
        )
    )
    banned = {p.lower() for p in compliance.prohibited}
    for f in factors:
        if f.name.lower() in banned:
            raise factors_table.error(
                f.name,
                f": factor '{f.name}' is prohibited ([compliance] prohibited); "
                f"factors prohibited by local law must not be used in rating, "
                f"so this spec is refused",
            )

    split = Split(
        **_section(
            top,
            "split",
            {
                "holdout": _holdout,
                "seed": lambda t, k: t.integer(k, low=0, high=MAX_SEED),
            },
        )
    )
    if split.holdout == "latest_period":
        if columns.period is None:
            raise top.error("split.holdout", "'latest_period' needs columns.period")
        split = Split(holdout=0.0, seed=split.seed, out_of_time=True)
    glm = GlmOptions(
        **_section(
            top,
            "glm",
            {
                "engine": lambda t, k: t.string(k, choices=("auto", "cells", "rows")),
                "tweedie_power": lambda t, k: _power(t, k, "auto"),
                "penalty": lambda t, k: t.string(k, choices=("credibility", "none")),
            },
        )
    )
    gbm = _parse_gbm(top, split.seed)
    table = TableOptions(
        **_section(
            top,
            "table",
            {
                "table_id": _text,
                "effective_date": lambda t, k: t.date(k),
                "exposure_unit": _text,
                "max_bands": lambda t, k: t.integer(k, low=1),
                "min_band_exposure": lambda t, k: t.number(k, low=0.0, high=0.5),
                "interactions": _interactions,
                "sample": lambda t, k: t.integer(k, low=100),
                "grid_points": lambda t, k: t.integer(k, low=2),
                "grid_rows": lambda t, k: t.integer(k, low=1000),
                "relativity_decimals": lambda t, k: t.integer(k, low=0, high=MAX_DECIMALS),
                "premium_decimals": lambda t, k: t.integer(k, low=0, high=MAX_DECIMALS),
                "target": lambda t, k: t.string(k, choices=("experience", "current_premium")),
                "overall_change": lambda t, k: t.number(k, low=-0.9, high=10.0),
            },
        )
    )
    names = {f.name for f in factors}
    for i, (a, b) in enumerate(table.interactions):
        for n in (a, b):
            if n not in names:
                raise top.error(f"table.interactions[{i}]", f"names '{n}', which is not a factor")
    if table.target == "current_premium" and columns.current_premium is None:
        raise top.error("table.target", "is current_premium but columns.current_premium is not set")
    loadings = _parse_loadings(top)
    experience = _parse_experience(top, columns)
    return Spec(
        columns=columns,
        factors=factors,
        split=split,
        glm=glm,
        gbm=gbm,
        table=table,
        loadings=loadings,
        compliance=compliance,
        experience=experience,
        source=source,
        raw=doc,
    )


def load_spec(path: str | Path) -> Spec:
    """Read and validate a pricing spec TOML file (UTF-8, a byte-order mark allowed).

    Parameters
    ----------
    path : str or Path
        The spec file.

    Returns
    -------
    Spec
        The validated spec; a missing, unreadable or malformed file or bad content raises `InputError`.
    """
    return parse_spec(read_toml(path, "spec"), source=str(Path(path)))
