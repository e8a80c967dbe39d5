"""The pricing spec: a TOML file read into validated, typed objects.

Every key has a documented default (see `DEFAULTS` below and DEVELOPERS.md); unknown keys, wrong
types and impossible options are refused with an `InputError` naming the file and the key.
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from premiumlab._core.errors import InputError

MONOTONE = ("increasing", "decreasing", "none")
FACTOR_TYPES = ("numeric", "categorical")

#: Factor names refused by default: characteristics that rating law in many places forbids.
#: A jurisdiction sets its own list in `[compliance] prohibited`.
DEFAULT_PROHIBITED = (
    "gender", "sex", "race", "ethnicity", "ethnic_origin", "colour", "color", "religion",
    "nationality", "national_origin", "disability", "sexual_orientation", "genetic", "marital_status",
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
        names = [self.exposure, self.claim_count, self.claim_amount, self.policy_id, self.period,
                 self.current_premium]
        return [n for n in names if n is not None]


@dataclass(frozen=True)
class Factor:
    """A rating factor: `numeric` (banded by `bands` edges, or by `n_bands` exposure quantiles) or
    `categorical` (levels read as strings; `levels` gives an order, which a monotone promise needs)."""

    name: str
    type: str
    monotone: str = "none"
    bands: tuple[float, ...] | None = None
    n_bands: int = 8
    levels: tuple[str, ...] | None = None
    base: str | None = None
    fallback: str | None = None

    @property
    def direction(self) -> int:
        """+1 for an increasing promise, -1 for decreasing, 0 for none."""
        return {"increasing": 1, "decreasing": -1, "none": 0}[self.monotone]

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
    seed: int = 2026
    out_of_time: bool = False


@dataclass(frozen=True)
class GlmOptions:
    """GLM baseline options. engine: auto | cells | rows; tweedie_power: "auto" or a number in (1, 2)."""

    engine: str = "auto"
    tweedie_power: float | str = "auto"


@dataclass(frozen=True)
class GbmOptionsSpec:
    """Boosted-tree options as written in the spec; mapped onto `premiumlab.gbm.GbmOptions`."""

    folds: int = 5
    max_settings: int = 8
    threads: int = 2
    max_rounds: int = 2000
    early_stopping_rounds: int = 50
    monotone_method: str = "advanced"
    constrain_severity: bool = False
    tweedie_power: float | str = "glm"


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
    relativity_decimals: int = 3
    premium_decimals: int = 2
    target: str = "experience"
    overall_change: float = 0.0


@dataclass(frozen=True)
class Loadings:
    """Expense and profit loadings applied to the pure premium (ratios of premium, money per exposure)."""

    lae_ratio: float = 0.0
    fixed_expense: float = 0.0
    variable_expense: float = 0.0
    profit: float = 0.0
    minimum_premium: float = 0.0


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
    gbm: GbmOptionsSpec = GbmOptionsSpec()
    table: TableOptions = TableOptions()
    loadings: Loadings = Loadings()
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

def _where(source: str, key: str) -> str:
    return f"{source}: key '{key}'"


def _check_keys(source: str, prefix: str, table: dict, allowed: set[str]) -> None:
    for key in table:
        if key not in allowed:
            raise InputError(f"{_where(source, prefix + key)} is unknown; allowed here: "
                             f"{', '.join(sorted(allowed))}")


def _expect(source: str, key: str, value: Any, kinds: tuple[type, ...], what: str) -> Any:
    ok = isinstance(value, kinds) and not (isinstance(value, bool) and bool not in kinds)
    if not ok:
        raise InputError(f"{_where(source, key)} must be {what}, got {value!r}")
    return value


def _number(source: str, key: str, value: Any, low: float | None = None, high: float | None = None,
            low_open: bool = False, high_open: bool = False) -> float:
    _expect(source, key, value, (int, float), "a number")
    v = float(value)
    if not math.isfinite(v):
        raise InputError(f"{_where(source, key)} must be finite, got {value!r}")
    if low is not None and (v < low or (low_open and v == low)):
        raise InputError(f"{_where(source, key)} must be {'>' if low_open else '>='} {low:g}, got {value!r}")
    if high is not None and (v > high or (high_open and v == high)):
        raise InputError(f"{_where(source, key)} must be {'<' if high_open else '<='} {high:g}, got {value!r}")
    return v


def _integer(source: str, key: str, value: Any, low: int) -> int:
    _expect(source, key, value, (int,), "an integer")
    if value < low:
        raise InputError(f"{_where(source, key)} must be >= {low}, got {value!r}")
    return int(value)


def _string(source: str, key: str, value: Any, choices: tuple[str, ...] | None = None) -> str:
    _expect(source, key, value, (str,), "a string")
    if choices is not None and value not in choices:
        raise InputError(f"{_where(source, key)} must be one of {', '.join(choices)}, got {value!r}")
    return value


def _section(source: str, doc: dict, name: str) -> dict:
    value = doc.get(name, {})
    return _expect(source, name, value, (dict,), "a table")


def _parse_columns(source: str, doc: dict) -> Columns:
    if "columns" not in doc:
        raise InputError(f"{_where(source, 'columns')} is missing: the spec must name the exposure and "
                         f"claim_count columns")
    sec = _section(source, doc, "columns")
    allowed = {"exposure", "claim_count", "claim_amount", "policy_id", "period", "current_premium"}
    _check_keys(source, "columns.", sec, allowed)
    for req in ("exposure", "claim_count"):
        if req not in sec:
            raise InputError(f"{_where(source, 'columns.' + req)} is required")
    values = {k: _string(source, f"columns.{k}", v) for k, v in sec.items()}
    seen: dict[str, str] = {}
    for k, v in values.items():
        if v in seen:
            raise InputError(f"{_where(source, 'columns.' + k)} names column '{v}', already used by "
                             f"columns.{seen[v]}")
        seen[v] = k
    return Columns(**values)


def _parse_factor(source: str, name: str, sec: Any) -> Factor:
    prefix = f"factors.{name}."
    _expect(source, f"factors.{name}", sec, (dict,), "a table")
    _check_keys(source, prefix, sec, {"type", "monotone", "bands", "n_bands", "levels", "base",
                                      "fallback"})
    if "type" not in sec:
        raise InputError(f"{_where(source, prefix + 'type')} is required (numeric or categorical)")
    ftype = _string(source, prefix + "type", sec["type"], FACTOR_TYPES)
    monotone = _string(source, prefix + "monotone", sec.get("monotone", "none"), MONOTONE)
    bands = levels = None
    n_bands = 8
    if ftype == "numeric":
        for bad in ("levels", "fallback"):
            if bad in sec:
                raise InputError(f"{_where(source, prefix + bad)} applies only to categorical factors")
        if "bands" in sec:
            raw = _expect(source, prefix + "bands", sec["bands"], (list,), "a list of band edges")
            if not raw:
                raise InputError(f"{_where(source, prefix + 'bands')} must not be empty")
            bands = tuple(_number(source, f"{prefix}bands[{i}]", v) for i, v in enumerate(raw))
            for i in range(1, len(bands)):
                if bands[i] <= bands[i - 1]:
                    raise InputError(f"{_where(source, prefix + 'bands')} must be strictly increasing: "
                                     f"{bands[i - 1]:g} then {bands[i]:g}")
        if "n_bands" in sec:
            if bands is not None:
                raise InputError(f"{_where(source, prefix + 'n_bands')} conflicts with bands: give one")
            n_bands = _integer(source, prefix + "n_bands", sec["n_bands"], 2)
    else:
        if "bands" in sec or "n_bands" in sec:
            raise InputError(f"{_where(source, prefix + 'bands')} applies only to numeric factors")
        if "levels" in sec:
            raw = _expect(source, prefix + "levels", sec["levels"], (list,), "a list of level names")
            levels = tuple(_string(source, f"{prefix}levels[{i}]", v) for i, v in enumerate(raw))
            if len(set(levels)) != len(levels):
                dup = next(v for v in levels if levels.count(v) > 1)
                raise InputError(f"{_where(source, prefix + 'levels')} lists level '{dup}' twice")
            if len(levels) < 2:
                raise InputError(f"{_where(source, prefix + 'levels')} needs at least two levels")
        if monotone != "none" and levels is None:
            raise InputError(f"{_where(source, prefix + 'monotone')}: a monotone promise needs an order, "
                             f"but '{name}' is an unordered categorical; give its `levels` in order")
    base = sec.get("base")
    if base is not None:
        base = _string(source, prefix + "base", base)
        if levels is not None and base not in levels:
            raise InputError(f"{_where(source, prefix + 'base')} '{base}' is not one of its levels")
    fallback = sec.get("fallback")
    if fallback is not None:
        fallback = _string(source, prefix + "fallback", fallback)
        if levels is not None and fallback not in levels:
            raise InputError(f"{_where(source, prefix + 'fallback')} '{fallback}' is not one of its levels")
    return Factor(name=name, type=ftype, monotone=monotone, bands=bands, n_bands=n_bands, levels=levels,
                  base=base, fallback=fallback)


def _parse_simple(source: str, doc: dict, name: str, cls: type, checks: dict[str, Any]) -> Any:
    """Parse a flat section whose keys map onto `cls` fields; `checks[key](key_path, value)`."""
    sec = _section(source, doc, name)
    _check_keys(source, name + ".", sec, set(checks))
    values = {k: checks[k](f"{name}.{k}", v) for k, v in sec.items()}
    return cls(**values)


def _power(source: str, key: str, value: Any, words: tuple[str, ...]) -> float | str:
    if isinstance(value, str):
        return _string(source, key, value, words)
    return _number(source, key, value, 1.0, 2.0, low_open=True, high_open=True)


def _interactions(source: str, key: str, value: Any) -> tuple[tuple[str, str], ...]:
    _expect(source, key, value, (list,), "a list of factor pairs")
    pairs = []
    for i, pair in enumerate(value):
        if not (isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str) for p in pair)):
            raise InputError(f"{_where(source, f'{key}[{i}]')} must be a pair of factor names, got {pair!r}")
        if pair[0] == pair[1]:
            raise InputError(f"{_where(source, f'{key}[{i}]')} pairs factor '{pair[0]}' with itself")
        pairs.append((pair[0], pair[1]))
    return tuple(pairs)


def _date(source: str, key: str, value: Any) -> str:
    import datetime as dt
    text = value.isoformat() if isinstance(value, dt.date) else _string(source, key, value)
    try:
        dt.date.fromisoformat(text)
    except ValueError:
        raise InputError(f"{_where(source, key)} must be a date YYYY-MM-DD, got {value!r}") from None
    return text


def _rates_by_period(source: str, key: str, value: Any) -> dict[str, float] | str:
    if isinstance(value, str):
        return value
    _expect(source, key, value, (dict,), "a table of period = factor, or a CSV file name")
    return {str(k): _number(source, f"{key}.{k}", v, 0.0, low_open=True) for k, v in value.items()}


def _trend(source: str, key: str, value: Any) -> dict[str, float]:
    _expect(source, key, value, (dict,), "a table with frequency and/or severity")
    _check_keys(source, key + ".", value, {"frequency", "severity"})
    return {k: _number(source, f"{key}.{k}", v, -0.5, 1.0) for k, v in value.items()}


def _dates_by_period(source: str, key: str, value: Any) -> dict[str, str]:
    _expect(source, key, value, (dict,), "a table of period = date")
    return {str(k): _date(source, f"{key}.{k}", v) for k, v in value.items()}


def _holdout(source: str, key: str, value: Any) -> float | str:
    if isinstance(value, str) and value != "latest_period":
        raise InputError(f"{_where(source, key)} must be a number in [0, 1) or 'latest_period', got {value!r}")
    if isinstance(value, str):
        return value
    return _number(source, key, value, 0.0, 1.0, high_open=True)


def _parse_experience(s: str, doc: dict, columns: Columns) -> Experience:
    def boolean(k: str, v: Any) -> bool:
        return _expect(s, k, v, (bool,), "true or false")

    e = _parse_simple(s, doc, "experience", Experience, {
        "large_loss_cap": lambda k, v: _number(s, k, v, 0.0, low_open=True),
        "excess_load_history": lambda k, v: _number(s, k, v, 0.0, 10.0),
        "claims_file": lambda k, v: _string(s, k, v),
        "claims_amount_column": lambda k, v: _string(s, k, v),
        "catastrophe_column": lambda k, v: _string(s, k, v),
        "development": lambda k, v: _rates_by_period(s, k, v),
        "development_applies_to_counts": boolean,
        "trend": lambda k, v: _trend(s, k, v),
        "future_midpoint": lambda k, v: _date(s, k, v),
        "term_years": lambda k, v: _number(s, k, v, 0.0, 10.0, low_open=True),
        "period_midpoints": lambda k, v: _dates_by_period(s, k, v),
        "period_control": boolean,
    })
    given = set(_section(s, doc, "experience"))
    needs = [  # (key, what it needs, whether that is there)
        ("large_loss_cap", "columns.claim_amount", columns.claim_amount is not None),
        ("excess_load_history", "experience.large_loss_cap", e.large_loss_cap is not None),
        ("claims_file", "columns.policy_id and columns.claim_amount",
         columns.policy_id is not None and columns.claim_amount is not None),
        ("claims_file", "experience.large_loss_cap or experience.catastrophe_column",
         e.large_loss_cap is not None or e.catastrophe_column is not None),
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
            raise InputError(f"{_where(s, 'experience.' + key)} needs {what}")
    return e


def parse_spec(doc: dict, source: str = "spec") -> Spec:
    """Validate a parsed TOML document and build the `Spec`."""
    s = source
    _check_keys(s, "", doc, {"columns", "factors", "split", "glm", "gbm", "table", "loadings",
                             "compliance", "experience"})
    columns = _parse_columns(s, doc)
    fsec = _section(s, doc, "factors")
    if not fsec:
        raise InputError(f"{_where(s, 'factors')} is missing: the spec needs at least one rating factor")
    factors = tuple(_parse_factor(s, name, sec) for name, sec in fsec.items())
    for f in factors:
        if f.name in columns.used():
            raise InputError(f"{_where(s, 'factors.' + f.name)}: '{f.name}' is also a column of [columns]")

    compliance = _parse_simple(s, doc, "compliance", Compliance, {
        "prohibited": lambda k, v: tuple(_string(s, f"{k}[{i}]", x) for i, x in
                                         enumerate(_expect(s, k, v, (list,), "a list of factor names"))),
        "jurisdiction": lambda k, v: _string(s, k, v),
    })
    banned = {p.lower() for p in compliance.prohibited}
    for f in factors:
        if f.name.lower() in banned:
            raise InputError(f"{_where(s, 'factors.' + f.name)}: factor '{f.name}' is prohibited "
                             f"([compliance] prohibited); factors prohibited by local law must not be used "
                             f"in rating, so this spec is refused")

    split = _parse_simple(s, doc, "split", Split, {
        "holdout": lambda k, v: _holdout(s, k, v),
        "seed": lambda k, v: _integer(s, k, v, 0),
    })
    if split.holdout == "latest_period":
        if columns.period is None:
            raise InputError(f"{_where(s, 'split.holdout')} 'latest_period' needs columns.period")
        split = Split(holdout=0.0, seed=split.seed, out_of_time=True)
    glm = _parse_simple(s, doc, "glm", GlmOptions, {
        "engine": lambda k, v: _string(s, k, v, ("auto", "cells", "rows")),
        "tweedie_power": lambda k, v: _power(s, k, v, ("auto",)),
    })
    gbm = _parse_simple(s, doc, "gbm", GbmOptionsSpec, {
        "folds": lambda k, v: _integer(s, k, v, 2),
        "max_settings": lambda k, v: _integer(s, k, v, 1),
        "threads": lambda k, v: _integer(s, k, v, 1),
        "max_rounds": lambda k, v: _integer(s, k, v, 1),
        "early_stopping_rounds": lambda k, v: _integer(s, k, v, 1),
        "monotone_method": lambda k, v: _string(s, k, v, ("basic", "intermediate", "advanced")),
        "constrain_severity": lambda k, v: _expect(s, k, v, (bool,), "true or false"),
        "tweedie_power": lambda k, v: _power(s, k, v, ("glm",)),
    })
    table = _parse_simple(s, doc, "table", TableOptions, {
        "table_id": lambda k, v: _string(s, k, v),
        "effective_date": lambda k, v: _date(s, k, v),
        "exposure_unit": lambda k, v: _string(s, k, v),
        "max_bands": lambda k, v: _integer(s, k, v, 1),
        "min_band_exposure": lambda k, v: _number(s, k, v, 0.0, 0.5),
        "interactions": lambda k, v: _interactions(s, k, v),
        "sample": lambda k, v: _integer(s, k, v, 100),
        "grid_points": lambda k, v: _integer(s, k, v, 2),
        "relativity_decimals": lambda k, v: _integer(s, k, v, 0),
        "premium_decimals": lambda k, v: _integer(s, k, v, 0),
        "target": lambda k, v: _string(s, k, v, ("experience", "current_premium")),
        "overall_change": lambda k, v: _number(s, k, v, -0.9, 10.0),
    })
    names = {f.name for f in factors}
    for i, (a, b) in enumerate(table.interactions):
        for n in (a, b):
            if n not in names:
                raise InputError(f"{_where(s, f'table.interactions[{i}]')} names '{n}', which is not a factor")
    if table.target == "current_premium" and columns.current_premium is None:
        raise InputError(f"{_where(s, 'table.target')} is current_premium but columns.current_premium "
                         f"is not set")
    loadings = _parse_simple(s, doc, "loadings", Loadings, {
        "lae_ratio": lambda k, v: _number(s, k, v, 0.0, 5.0),
        "fixed_expense": lambda k, v: _number(s, k, v, 0.0),
        "variable_expense": lambda k, v: _number(s, k, v, 0.0, 1.0, high_open=True),
        "profit": lambda k, v: _number(s, k, v, -0.5, 1.0, high_open=True),
        "minimum_premium": lambda k, v: _number(s, k, v, 0.0),
    })
    if loadings.variable_expense + loadings.profit >= 1.0:
        raise InputError(f"{_where(s, 'loadings')}: variable_expense + profit must be below 1, got "
                         f"{loadings.variable_expense + loadings.profit:g}")
    experience = _parse_experience(s, doc, columns)
    return Spec(columns=columns, factors=factors, split=split, glm=glm, gbm=gbm, table=table,
                loadings=loadings, compliance=compliance, experience=experience, source=s, raw=doc)


def load_spec(path: str | Path) -> Spec:
    """Read and validate a pricing spec TOML file."""
    p = Path(path)
    if p.is_dir():
        raise InputError(f"{p}: is a directory, expected a spec TOML file")
    try:
        text = p.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{p}: spec file not found") from None
    except UnicodeDecodeError as e:
        raise InputError(f"{p}: not UTF-8 text (byte {e.start})") from None
    except OSError as e:
        raise InputError(f"{p}: cannot read spec ({e.strerror})") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"{p}: malformed TOML: {e}") from None
    return parse_spec(doc, source=str(p))
