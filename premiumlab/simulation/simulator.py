"""Scenario simulator: an invented portfolio described in TOML -> a synthetic book and `truth.json`.

The data are invented (fictional insurers, fictional regions). They exist for the demo and for tests
that recover known effects; any table built on them is a draft for a qualified actuary and, for real
use, must be filed and approved under local rate regulation.

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
level) and `I` the interaction multiplier (1 outside its region). `claim_amount` is the row's sum of
claims rounded to cents (at least 0.01 when it has claims).

Scenario keys (every key; anything else is refused with an `InputError` naming the key)
-----------------------------------------------------------------------------------------
[scenario]
  name               string, required: identifier written to truth.json
  description        string, default "": one line about the invented portfolio
  policies           integer >= 1, required: default number of policies
  seed               integer >= 0, required: default seed of numpy's `default_rng`
  periods            list of consecutive integers, required: e.g. [2024, 2025], written as `year`
  base_frequency     number > 0, required: claims per policy-year where every effect is 1
  base_severity      number > 0, required: mean attritional claim (currency) where every effect is 1
  severity_shape     number > 0, default 1.5: Gamma shape of attritional claims (CV = 1/sqrt(shape))
  new_business_share number in [0, 1], default 0.15: share of policies that start on a uniformly
                     drawn day of the window (the others are in force from its first day)
  lapse_share        number in [0, 1], default 0.10: share of policies that end on a uniformly drawn
                     day after their start (the others stay in force to the end of the window)

[large_losses]       optional; absent = no large losses
  probability        number in [0, 1), required: probability that a claim is large
  distribution       "pareto" | "lognormal", required
  threshold, shape   pareto: scale (smallest large loss) > 0 and tail index > 1 (finite mean
                     shape x threshold / (shape - 1))
  median, sigma      lognormal: median > 0 and log-scale sd > 0 (mean median x exp(sigma^2 / 2))

[factors.NAME]       at least one; drawn once per policy in file order; NAME is the book's column
  type               "numeric" | "categorical", required
  base               optional: level or band label to which truth.json normalises (default: the
                     level or band with the largest exposure in the simulated book)
  depends_on         optional: an earlier factor; `[factors.NAME.when.LABEL]` then overrides this
                     factor's distribution parameters for policies whose depends_on factor has that
                     level (categorical) or band label (numeric, e.g. "[-inf, 25)", value in the
                     policy's first period of the window)
  numeric only:
  distribution       "uniform" (low, high) | "integers" (low, high, both inclusive) |
                     "normal" (mean, sd) | "lognormal" (median, sigma) |
                     "histogram" (edges: increasing list; weights: one >= 0 per interval; uniform
                     within an interval), required, with its parameters as keys
  clip               optional [low, high]: values are clipped to it
  round_to           optional number > 0: values are rounded to a multiple of it (default 1 for
                     "integers", else none); clip bounds must then be multiples of it. An integer
                     round_to writes the column as integers
  step_per_period    number, default 0: added per period (e.g. 1 for ages), before clip and rounding
  bands              required list of strictly increasing interior edges, lower-inclusive: exactly
                     the edges of the matching pricing spec; [21, 25] gives "[-inf, 21)",
                     "[21, 25)", "[25, inf)" (numbers in `g` format)
  frequency_curve    optional list of [x, log-relativity] knots, x strictly increasing; linear
  severity_curve     between knots, flat beyond the ends (absent: no effect)
  categorical only:
  levels             required list of distinct strings (an ordered factor lists them in order)
  probabilities      required list, one >= 0 per level, summing to 1
  frequency_relativity  optional table level = relativity > 0, naming every level (absent: all 1)
  severity_relativity   the same for severity
  [factors.NAME.when.LABEL]  numeric: any of the distribution's parameter keys; categorical:
                     `probabilities`

[interaction]        optional
  factors            required [a, b]: two different factors
  frequency          number > 0, default 1: frequency multiplier inside the region
  severity           number > 0, default 1: severity multiplier inside the region
  [interaction.region]  required, one key per factor: numeric [low, high] meaning low <= x < high
                     (`inf` allowed); categorical a list of levels

[current_tariff]     optional; the insurer's current, cruder premium, written as `current_premium`
  expected_loss_ratio  number > 0, default 0.7: expected claims / current premium over the book
  [current_tariff.shrink]  optional table factor = exponent in [0, 1]: the tariff rates that factor
                     with (true band/level pure-premium relativity) ^ exponent; unlisted factors are
                     not rated. Premium = base rate x product x exposure, rounded to cents, where
                     the base rate gives the expected loss ratio.

truth.json
----------
Per factor: `relativities` {frequency, severity, pure_premium} per level or band, normalised so the
`base` level/band is 1 (`base_rule` says why it is the base), and `exposure` per level/band. For a
numeric factor the band values average the true curve over the simulated rows in the band:
frequency weighted by exposure, severity by exposure x true frequency (the expected claim count,
interaction included), pure premium = exposure-weighted mean of freq_j x sev_j; `curve` gives the
true relativities on a grid of 101 points from the smallest to the largest value (same
normalisation). Empty bands are null. Main effects exclude the interaction; `interaction.cells`
lists, per band/level pair with exposure, the mean interaction multiplier (weighted as above; 1 =
no interaction). `base` gives frequency, severity and pure premium at the base of every factor
(outside the interaction), `scenario_base` where every effect is 1, `large_losses` the expected
share of claim amounts from large losses.
"""
from __future__ import annotations

import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from premiumlab.book.bands import assign_bands, band_labels
from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import write_json

#: The columns every simulated book starts with; the factor columns and `current_premium` follow.
LEAD_COLUMNS = ("policy_id", "year", "exposure", "claim_count", "claim_amount")
PREMIUM_COLUMN = "current_premium"
DAYS_PER_PERIOD = 365
GRID_POINTS = 101
TRUTH_FILE = "truth.json"
CAUTION = ("Invented data from a fictional scenario, for demonstration and testing only. Any rating "
           "table built from it is a draft for review by a qualified actuary and, for real use, must "
           "be filed and approved under local rate regulation.")

_REQUIRED: Any = object()
_DISTRIBUTION_PARAMETERS = {
    "uniform": ("low", "high"),
    "integers": ("low", "high"),
    "normal": ("mean", "sd"),
    "lognormal": ("median", "sigma"),
    "histogram": ("edges", "weights"),
}


# --------------------------------------------------------------------------------------------
# reading TOML tables with precise messages

def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


class _Table:
    """One TOML table of a scenario file: typed reads by key; `close()` refuses unread keys."""

    def __init__(self, data: Any, where: str, source: str) -> None:
        if not isinstance(data, dict):
            raise InputError(f"{source}: key '{where}' must be a table, got {data!r}")
        self.data, self.where, self.source = data, where, source
        self.read: set[str] = set()

    def path(self, key: str) -> str:
        return f"{self.where}.{key}" if self.where else key

    def error(self, key: str, message: str) -> InputError:
        return InputError(f"{self.source}: key '{self.path(key)}' {message}")

    def has(self, key: str) -> bool:
        return key in self.data

    def keys(self) -> list[str]:
        self.read.update(self.data)
        return list(self.data)

    def raw(self, key: str, default: Any = _REQUIRED) -> Any:
        self.read.add(key)
        if key in self.data:
            return self.data[key]
        if default is _REQUIRED:
            near = difflib.get_close_matches(key, [k for k in self.data if k not in self.read], n=1)
            raise self.error(key, "is required" + (f" (unknown key '{self.path(near[0])}' given)" if near else ""))
        return default

    def number(self, key: str, default: Any = _REQUIRED, *, low: float | None = None,
               high: float | None = None, low_open: bool = False, high_open: bool = False) -> float:
        value = self.raw(key, default)
        if not _is_number(value) or not math.isfinite(value):
            raise self.error(key, f"must be a finite number, got {value!r}")
        v = float(value)
        if low is not None and (v < low or (low_open and v == low)):
            raise self.error(key, f"must be {'>' if low_open else '>='} {low:g}, got {value!r}")
        if high is not None and (v > high or (high_open and v == high)):
            raise self.error(key, f"must be {'<' if high_open else '<='} {high:g}, got {value!r}")
        return v

    def integer(self, key: str, default: Any = _REQUIRED, *, low: int | None = None) -> int:
        value = self.raw(key, default)
        if not isinstance(value, int) or isinstance(value, bool):
            raise self.error(key, f"must be an integer, got {value!r}")
        if low is not None and value < low:
            raise self.error(key, f"must be >= {low}, got {value!r}")
        return value

    def string(self, key: str, default: Any = _REQUIRED, choices: tuple[str, ...] | None = None,
               allow_empty: bool = False) -> str:
        value = self.raw(key, default)
        if not isinstance(value, str) or not (value or allow_empty):
            raise self.error(key, f"must be a {'' if allow_empty else 'non-empty '}string, got {value!r}")
        if choices is not None and value not in choices:
            raise self.error(key, f"must be one of {', '.join(choices)}, got {value!r}")
        return value

    def numbers(self, key: str, default: Any = _REQUIRED, *, allow_inf: bool = False) -> tuple[float, ...]:
        value = self.raw(key, default)
        if not isinstance(value, (list, tuple)) or not all(_is_number(v) for v in value):
            raise self.error(key, f"must be a list of numbers, got {value!r}")
        out = tuple(float(v) for v in value)
        if any(math.isnan(v) or (math.isinf(v) and not allow_inf) for v in out):
            raise self.error(key, f"must hold finite numbers, got {value!r}")
        return out

    def strings(self, key: str, default: Any = _REQUIRED) -> tuple[str, ...]:
        value = self.raw(key, default)
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) and v for v in value):
            raise self.error(key, f"must be a list of non-empty strings, got {value!r}")
        if len(set(value)) != len(value):
            raise self.error(key, f"names a value twice: {value!r}")
        return tuple(value)

    def table(self, key: str, default: Any = _REQUIRED) -> _Table | None:
        value = self.raw(key, default)
        return None if value is None else _Table(value, self.path(key), self.source)

    def close(self) -> None:
        unread = [k for k in self.data if k not in self.read]
        if unread:
            raise InputError(f"{self.source}: unknown key '{self.path(unread[0])}'")


def _increasing(t: _Table, key: str, values: tuple[float, ...], what: str = "values") -> None:
    if any(b <= a for a, b in zip(values, values[1:])):
        raise t.error(key, f"must have strictly increasing {what}, got {[float(v) for v in values]!r}")


# --------------------------------------------------------------------------------------------
# the scenario as typed objects

@dataclass(frozen=True)
class Distribution:
    """How one factor's values are drawn: a numeric kind with parameters, or level probabilities."""

    kind: str
    parameters: dict[str, Any]

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """n draws: floats for numeric kinds, level codes (int) for "levels"."""
        p = self.parameters
        if self.kind == "levels":
            return rng.choice(len(p["probabilities"]), size=n, p=p["probabilities"])
        if self.kind == "uniform":
            return rng.uniform(p["low"], p["high"], n)
        if self.kind == "integers":
            return rng.integers(int(p["low"]), int(p["high"]) + 1, n).astype(float)
        if self.kind == "normal":
            return rng.normal(p["mean"], p["sd"], n)
        if self.kind == "lognormal":
            return p["median"] * np.exp(p["sigma"] * rng.standard_normal(n))
        edges, weights = np.asarray(p["edges"]), np.asarray(p["weights"])
        interval = rng.choice(len(weights), size=n, p=weights / weights.sum())
        return edges[interval] + rng.random(n) * (edges[interval + 1] - edges[interval])


@dataclass(frozen=True)
class Factor:
    """A rating factor of the scenario with its distribution and true effects.

    Numeric factors carry `bands` (interior edges) and log-relativity knots; categorical factors
    carry `levels` with a relativity per level. Internally categorical values are level codes.
    """

    name: str
    type: str
    distribution: Distribution
    labels: tuple[str, ...]
    base: str | None = None
    depends_on: str | None = None
    when: dict[str, Distribution] = field(default_factory=dict)
    bands: tuple[float, ...] = ()
    clip: tuple[float, float] | None = None
    round_to: float | None = None
    step_per_period: float = 0.0
    frequency_knots: np.ndarray | None = None
    severity_knots: np.ndarray | None = None
    frequency_relativity: np.ndarray | None = None
    severity_relativity: np.ndarray | None = None

    @property
    def numeric(self) -> bool:
        return self.type == "numeric"

    @property
    def writes_integers(self) -> bool:
        """True when the numeric column holds whole numbers (an integer `round_to`)."""
        return self.round_to is not None and float(self.round_to).is_integer()

    def value(self, raw: np.ndarray, period_index: np.ndarray | int) -> np.ndarray:
        """Row values from the policy's raw draw: step per period, then clip, then rounding."""
        if not self.numeric:
            return raw
        v = raw + self.step_per_period * period_index
        if self.clip is not None:
            v = np.clip(v, *self.clip)
        if self.round_to is not None:
            v = np.round(v / self.round_to) * self.round_to
        return v

    def label_codes(self, values: np.ndarray) -> np.ndarray:
        """Index into `labels`: the band of a numeric value, or the level code itself."""
        return assign_bands(values, self.bands) if self.numeric else values

    def log_effect(self, values: np.ndarray, target: str) -> np.ndarray:
        """True log-relativity of each value on "frequency" or "severity"."""
        if self.numeric:
            knots = self.frequency_knots if target == "frequency" else self.severity_knots
            if knots is None:
                return np.zeros(len(values))
            return np.interp(values, knots[:, 0], knots[:, 1])
        rel = self.frequency_relativity if target == "frequency" else self.severity_relativity
        return np.zeros(len(values)) if rel is None else np.log(rel)[values]

    def in_region(self, values: np.ndarray, region: tuple) -> np.ndarray:
        """Rows inside an interaction region: [low, high) for numeric, a set of level codes otherwise."""
        if self.numeric:
            return (values >= region[0]) & (values < region[1])
        return np.isin(values, region)


@dataclass(frozen=True)
class LargeLosses:
    """Large claims: with `probability`, a claim is a Pareto or lognormal draw x its severity relativity."""

    probability: float
    distribution: str
    parameters: dict[str, float]

    @property
    def mean(self) -> float:
        """Mean large loss where every effect is 1 (currency)."""
        p = self.parameters
        if self.distribution == "pareto":
            return p["shape"] * p["threshold"] / (p["shape"] - 1.0)
        return p["median"] * math.exp(p["sigma"] ** 2 / 2.0)

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        p = self.parameters
        if self.distribution == "pareto":
            return p["threshold"] * (1.0 + rng.pareto(p["shape"], n))
        return p["median"] * np.exp(p["sigma"] * rng.standard_normal(n))


@dataclass(frozen=True)
class Interaction:
    """A multiplicative effect on rows inside a region of two factors."""

    factors: tuple[str, str]
    region: dict[str, tuple]
    frequency: float
    severity: float


@dataclass(frozen=True)
class Scenario:
    """A parsed scenario file (see the module docstring for every key)."""

    name: str
    description: str
    policies: int
    seed: int
    periods: tuple[int, ...]
    base_frequency: float
    base_severity: float
    severity_shape: float
    new_business_share: float
    lapse_share: float
    factors: tuple[Factor, ...]
    large_losses: LargeLosses | None
    interaction: Interaction | None
    expected_loss_ratio: float
    tariff_shrink: dict[str, float]

    def factor(self, name: str) -> Factor:
        return next(f for f in self.factors if f.name == name)


# --------------------------------------------------------------------------------------------
# parsing

def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file; bad input raises `InputError` naming the key."""
    p = Path(path)
    try:
        doc = tomllib.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{p}: scenario file not found") from None
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as e:
        raise InputError(f"{p}: not valid TOML ({e})") from None
    return parse_scenario(doc, str(p))


def parse_scenario(doc: dict, source: str = "scenario") -> Scenario:
    """Validate a scenario already read from TOML (`source` names it in messages)."""
    top = _Table(doc, "", source)
    s = top.table("scenario")
    head = dict(
        name=s.string("name"), description=s.string("description", "", allow_empty=True),
        policies=s.integer("policies", low=1), seed=s.integer("seed", low=0),
        periods=_periods(s), base_frequency=s.number("base_frequency", low=0, low_open=True),
        base_severity=s.number("base_severity", low=0, low_open=True),
        severity_shape=s.number("severity_shape", 1.5, low=0, low_open=True),
        new_business_share=s.number("new_business_share", 0.15, low=0, high=1),
        lapse_share=s.number("lapse_share", 0.10, low=0, high=1))
    s.close()

    factors_table = top.table("factors")
    factors: list[Factor] = []
    for name in factors_table.keys():
        if name in LEAD_COLUMNS or name == PREMIUM_COLUMN:
            raise factors_table.error(name, "clashes with a column the simulator writes")
        factors.append(_parse_factor(factors_table.table(name), name, factors))
    if not factors:
        raise top.error("factors", "must define at least one factor")
    factors_table.close()

    large = top.table("large_losses", None)
    interaction = top.table("interaction", None)
    tariff = top.table("current_tariff", None)
    loss_ratio, shrink = _parse_tariff(tariff, factors)
    scenario = Scenario(
        **head, factors=tuple(factors),
        large_losses=None if large is None else _parse_large_losses(large),
        interaction=None if interaction is None else _parse_interaction(interaction, factors),
        expected_loss_ratio=loss_ratio, tariff_shrink=shrink)
    top.close()
    return scenario


def _periods(s: _Table) -> tuple[int, ...]:
    value = s.raw("periods")
    if (not isinstance(value, list) or not value
            or not all(isinstance(v, int) and not isinstance(v, bool) for v in value)):
        raise s.error("periods", f"must be a non-empty list of integers, got {value!r}")
    if any(b != a + 1 for a, b in zip(value, value[1:])):
        raise s.error("periods", f"must be consecutive integers, got {value!r}")
    return tuple(value)


def _parse_factor(t: _Table, name: str, earlier: list[Factor]) -> Factor:
    ftype = t.string("type", choices=("numeric", "categorical"))
    depends_on = t.raw("depends_on", None)
    parent = None
    if depends_on is not None:
        parent = next((f for f in earlier if f.name == depends_on), None)
        if parent is None:
            raise t.error("depends_on", f"must name a factor defined above this one, got {depends_on!r}")
    parsed = _parse_numeric(t) if ftype == "numeric" else _parse_categorical(t)
    labels = parsed["labels"]
    base = t.raw("base", None)
    if base is not None and base not in labels:
        raise t.error("base", f"must be one of {', '.join(labels)}, got {base!r}")
    when: dict[str, Distribution] = {}
    when_table = t.table("when", None)
    if when_table is not None and parent is None:
        raise t.error("when", "needs depends_on")
    if when_table is None and parent is not None:
        raise t.error("depends_on", f"needs at least one [{t.where}.when.LABEL] table")
    if when_table is not None:
        for label in when_table.keys():
            if label not in parent.labels:
                raise when_table.error(label, f"is not a level or band of {parent.name}: "
                                              f"use one of {', '.join(parent.labels)}")
            override = when_table.table(label)
            when[label] = _parse_distribution(override, parsed["distribution"], labels)
            override.close()
        when_table.close()
    t.close()
    return Factor(name=name, type=ftype, base=base, depends_on=depends_on, when=when, **parsed)


def _parse_distribution(t: _Table, template: Distribution | str, levels: tuple[str, ...]) -> Distribution:
    """Parameters of `template`'s kind (a kind name, or a distribution whose values are defaults);
    the caller closes `t`."""
    kind = template if isinstance(template, str) else template.kind
    defaults = {} if isinstance(template, str) else template.parameters
    if kind == "levels":
        probs = t.numbers("probabilities", defaults.get("probabilities", _REQUIRED))
        if len(probs) != len(levels) or any(p < 0 for p in probs) or abs(sum(probs) - 1.0) > 1e-9:
            raise t.error("probabilities", f"must hold {len(levels)} numbers >= 0 summing to 1, got {list(probs)!r}")
        return Distribution(kind, {"probabilities": probs})
    a, b = _DISTRIBUTION_PARAMETERS[kind]
    if kind == "histogram":
        edges = t.numbers(a, defaults.get(a, _REQUIRED))
        weights = t.numbers(b, defaults.get(b, _REQUIRED))
        _increasing(t, a, edges)
        if len(edges) < 2:
            raise t.error(a, "needs at least two edges")
        if len(weights) != len(edges) - 1 or any(w < 0 for w in weights) or sum(weights) <= 0:
            raise t.error(b, f"must hold {len(edges) - 1} numbers >= 0 with a positive sum, got {list(weights)!r}")
        return Distribution(kind, {a: edges, b: weights})
    first = t.number(a, defaults.get(a, _REQUIRED))
    second = t.number(b, defaults.get(b, _REQUIRED))
    if kind in ("uniform", "integers") and (second < first or (kind == "uniform" and second == first)):
        raise t.error(b, f"must exceed {a} ({first:g}), got {second:g}")
    if kind == "integers" and not (first.is_integer() and second.is_integer()):
        raise t.error(a, "and high must be whole numbers")
    if kind in ("normal", "lognormal") and second <= 0:
        raise t.error(b, f"must be > 0, got {second:g}")
    if kind == "lognormal" and first <= 0:
        raise t.error(a, f"must be > 0, got {first:g}")
    return Distribution(kind, {a: first, b: second})


def _knots(t: _Table, key: str) -> np.ndarray | None:
    value = t.raw(key, None)
    if value is None:
        return None
    ok = (isinstance(value, list) and value
          and all(isinstance(k, list) and len(k) == 2 and all(_is_number(v) and math.isfinite(v) for v in k)
                  for k in value))
    if not ok:
        raise t.error(key, f"must be a list of [x, log-relativity] pairs of finite numbers, got {value!r}")
    knots = np.asarray(value, dtype=float)
    _increasing(t, key, tuple(knots[:, 0]), "x values")
    return knots


def _parse_numeric(t: _Table) -> dict[str, Any]:
    kind = t.string("distribution", choices=tuple(_DISTRIBUTION_PARAMETERS))
    distribution = _parse_distribution(t, kind, ())
    bands = t.numbers("bands")
    if not bands:
        raise t.error("bands", "must list at least one edge")
    _increasing(t, "bands", bands)
    clip = None
    if t.has("clip"):
        clip = t.numbers("clip")
        if len(clip) != 2 or clip[1] <= clip[0]:
            raise t.error("clip", f"must be [low, high] with low < high, got {list(clip)!r}")
    round_to = (t.number("round_to", low=0, low_open=True) if t.has("round_to")
                else 1.0 if kind == "integers" else None)
    if round_to is not None and clip is not None and not all((c / round_to).is_integer() for c in clip):
        raise t.error("clip", f"bounds must be multiples of round_to ({round_to:g}), got {list(clip)!r}")
    return dict(distribution=distribution, labels=tuple(band_labels(bands)), bands=bands, clip=clip,
                round_to=round_to, step_per_period=t.number("step_per_period", 0.0),
                frequency_knots=_knots(t, "frequency_curve"), severity_knots=_knots(t, "severity_curve"))


def _relativities(t: _Table, key: str, levels: tuple[str, ...]) -> np.ndarray | None:
    table = t.table(key, None)
    if table is None:
        return None
    values = np.array([table.number(level, low=0, low_open=True) for level in levels])
    table.close()
    return values


def _parse_categorical(t: _Table) -> dict[str, Any]:
    levels = t.strings("levels")
    if len(levels) < 2:
        raise t.error("levels", f"must list at least two levels, got {list(levels)!r}")
    distribution = _parse_distribution(t, "levels", levels)
    return dict(distribution=distribution, labels=levels,
                frequency_relativity=_relativities(t, "frequency_relativity", levels),
                severity_relativity=_relativities(t, "severity_relativity", levels))


def _parse_large_losses(t: _Table) -> LargeLosses:
    probability = t.number("probability", low=0, high=1, high_open=True)
    kind = t.string("distribution", choices=("pareto", "lognormal"))
    if kind == "pareto":
        params = {"threshold": t.number("threshold", low=0, low_open=True),
                  "shape": t.number("shape", low=1, low_open=True)}
    else:
        params = {"median": t.number("median", low=0, low_open=True),
                  "sigma": t.number("sigma", low=0, low_open=True)}
    t.close()
    return LargeLosses(probability, kind, params)


def _parse_interaction(t: _Table, factors: list[Factor]) -> Interaction:
    names = t.strings("factors")
    known = {f.name: f for f in factors}
    if len(names) != 2 or any(n not in known for n in names):
        raise t.error("factors", f"must name two different factors of the scenario, got {list(names)!r}")
    region_table = t.table("region")
    region: dict[str, tuple] = {}
    for name in names:
        f = known[name]
        if f.numeric:
            bounds = region_table.numbers(name, allow_inf=True)
            if len(bounds) != 2 or bounds[1] <= bounds[0]:
                raise region_table.error(name, f"must be [low, high] with low < high, got {list(bounds)!r}")
            region[name] = bounds
        else:
            levels = region_table.strings(name)
            unknown = [v for v in levels if v not in f.labels]
            if not levels or unknown:
                raise region_table.error(name, f"must list levels of {name}, got {list(levels)!r}")
            region[name] = tuple(f.labels.index(v) for v in levels)
    region_table.close()
    interaction = Interaction(names, region, t.number("frequency", 1.0, low=0, low_open=True),
                              t.number("severity", 1.0, low=0, low_open=True))
    t.close()
    return interaction


def _parse_tariff(t: _Table | None, factors: list[Factor]) -> tuple[float, dict[str, float]]:
    if t is None:
        return 0.7, {}
    loss_ratio = t.number("expected_loss_ratio", 0.7, low=0, low_open=True)
    shrink_table = t.table("shrink", None)
    shrink: dict[str, float] = {}
    if shrink_table is not None:
        names = {f.name for f in factors}
        for name in shrink_table.keys():
            if name not in names:
                raise shrink_table.error(name, "is not a factor of the scenario")
            shrink[name] = shrink_table.number(name, low=0, high=1)
        shrink_table.close()
    t.close()
    return loss_ratio, shrink


# --------------------------------------------------------------------------------------------
# drawing the book (pure functions of the scenario and the random generator)

@dataclass(frozen=True)
class SimulatedBook:
    """A simulated book, its truth (the content of truth.json) and the number of large claims."""

    book: pd.DataFrame
    truth: dict
    large_claims: int


@dataclass(frozen=True)
class _Rows:
    """The rows of the book before claims: who, when, how much exposure, which factor values."""

    policy: np.ndarray
    period: np.ndarray
    exposure: np.ndarray
    values: dict[str, np.ndarray]


@dataclass(frozen=True)
class _Effects:
    """True per-row effects: log-relativities per factor, interaction multipliers, frequency and
    the severity relativity (attritional mean = base_severity x severity_relativity)."""

    log_frequency: dict[str, np.ndarray]
    log_severity: dict[str, np.ndarray]
    interaction_frequency: np.ndarray
    interaction_severity: np.ndarray
    frequency: np.ndarray
    severity_relativity: np.ndarray


def _exposure_rows(rng: np.random.Generator, n: int, periods: int, new_business: float,
                   lapse: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(policy index, period index, exposure in policy-years) of every row, ordered by policy then
    period. A policy is in force on days [start, end) of the window of `periods` x 365 days."""
    days = DAYS_PER_PERIOD * periods
    starts_late = rng.random(n) < new_business
    start = np.where(starts_late, rng.integers(0, days, n), 0)
    ends_early = rng.random(n) < lapse
    early_end = start + 1 + np.floor(rng.random(n) * (days - start)).astype(np.int64)
    end = np.where(ends_early, early_end, days)
    period_start = DAYS_PER_PERIOD * np.arange(periods)
    in_force = (np.minimum(end[:, None], period_start + DAYS_PER_PERIOD)
                - np.maximum(start[:, None], period_start)).clip(0, DAYS_PER_PERIOD)
    policy, period = np.nonzero(in_force)
    return policy, period, in_force[policy, period] / DAYS_PER_PERIOD


def _draw_factors(rng: np.random.Generator, factors: tuple[Factor, ...], n: int) -> dict[str, np.ndarray]:
    """Policy-level raw draws (numeric values or level codes), factor by factor in scenario order;
    a dependent factor is drawn group by group of its parent's first-period label."""
    raw: dict[str, np.ndarray] = {}
    by_name = {f.name: f for f in factors}
    for f in factors:
        if not f.when:
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


def _effects(scenario: Scenario, values: dict[str, np.ndarray]) -> _Effects:
    n = len(next(iter(values.values())))
    log_f = {f.name: f.log_effect(values[f.name], "frequency") for f in scenario.factors}
    log_s = {f.name: f.log_effect(values[f.name], "severity") for f in scenario.factors}
    inter_f, inter_s = np.ones(n), np.ones(n)
    ia = scenario.interaction
    if ia is not None:
        inside = np.logical_and.reduce([scenario.factor(name).in_region(values[name], ia.region[name])
                                        for name in ia.factors])
        inter_f[inside], inter_s[inside] = ia.frequency, ia.severity
    frequency = scenario.base_frequency * np.exp(sum(log_f.values())) * inter_f
    return _Effects(log_f, log_s, inter_f, inter_s, frequency, np.exp(sum(log_s.values())) * inter_s)


def _claim_amounts(rng: np.random.Generator, scenario: Scenario, counts: np.ndarray,
                   severity_relativity: np.ndarray) -> tuple[np.ndarray, int]:
    """Sum of each row's claims (cents, at least 0.01 on a row with claims) and the number of large
    claims; all claims are drawn at once and summed per row."""
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


def _mean_severity(scenario: Scenario) -> float:
    """Mean claim (attritional and large) where every effect is 1."""
    ll = scenario.large_losses
    if ll is None:
        return scenario.base_severity
    return (1.0 - ll.probability) * scenario.base_severity + ll.probability * ll.mean


def _weighted_means(codes: np.ndarray, k: int, weights: np.ndarray, values: np.ndarray) -> np.ndarray:
    """sum(weights x values) / sum(weights) per code 0..k-1 (NaN where the weight is 0)."""
    w = np.bincount(codes, weights=weights, minlength=k)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.bincount(codes, weights=weights * values, minlength=k) / w


def _factor_truth(f: Factor, values: np.ndarray, exposure: np.ndarray,
                  effects: _Effects) -> tuple[dict, dict[str, float]]:
    """The factor's entry of truth.json, and its unnormalised band/level averages at its base."""
    codes = f.label_codes(values)
    k = len(f.labels)
    fr, sr = np.exp(effects.log_frequency[f.name]), np.exp(effects.log_severity[f.name])
    expected_claims = exposure * effects.frequency
    raw = {"frequency": _weighted_means(codes, k, exposure, fr),
           "severity": _weighted_means(codes, k, expected_claims, sr),
           "pure_premium": _weighted_means(codes, k, exposure, fr * sr)}
    label_exposure = np.bincount(codes, weights=exposure, minlength=k)
    base = f.base if f.base is not None else f.labels[int(np.argmax(label_exposure))]
    b = f.labels.index(base)
    out: dict[str, Any] = {
        "type": f.type, "base": base,
        "base_rule": "scenario" if f.base is not None else "largest exposure",
        "relativities": {t: dict(zip(f.labels, v / v[b])) for t, v in raw.items()},
        "exposure": dict(zip(f.labels, label_exposure)),
    }
    if f.numeric:
        out["bands"] = list(f.bands)
        grid = np.linspace(values.min(), values.max(), GRID_POINTS)
        gf, gs = np.exp(f.log_effect(grid, "frequency")), np.exp(f.log_effect(grid, "severity"))
        out["curve"] = {"x": grid, "frequency": gf / raw["frequency"][b],
                        "severity": gs / raw["severity"][b], "pure_premium": gf * gs / raw["pure_premium"][b]}
    else:
        out["levels"] = list(f.labels)
    return out, {t: float(v[b]) for t, v in raw.items()}


def _interaction_truth(scenario: Scenario, rows: _Rows, effects: _Effects) -> dict | None:
    ia = scenario.interaction
    if ia is None:
        return None
    a, b = (scenario.factor(name) for name in ia.factors)
    ka, kb = len(a.labels), len(b.labels)
    cell = a.label_codes(rows.values[a.name]) * kb + b.label_codes(rows.values[b.name])
    e = rows.exposure
    exposure = np.bincount(cell, weights=e, minlength=ka * kb)
    freq = _weighted_means(cell, ka * kb, e, effects.interaction_frequency)
    sev = _weighted_means(cell, ka * kb, e * effects.frequency, effects.interaction_severity)
    pp = _weighted_means(cell, ka * kb, e, effects.interaction_frequency * effects.interaction_severity)
    cells = [{a.name: a.labels[c // kb], b.name: b.labels[c % kb], "exposure": exposure[c],
              "frequency": freq[c], "severity": sev[c], "pure_premium": pp[c]}
             for c in np.flatnonzero(exposure > 0)]
    region = {name: list(bounds) if scenario.factor(name).numeric
              else [scenario.factor(name).labels[i] for i in bounds] for name, bounds in ia.region.items()}
    return {"factors": list(ia.factors), "region": region, "frequency": ia.frequency,
            "severity": ia.severity, "cells": cells}


def _current_premium(scenario: Scenario, rows: _Rows, factors: dict[str, dict],
                     expected_amount: float) -> tuple[np.ndarray, dict]:
    """Current premium per row (cents, at least 0.01) and the tariff's description for truth.json."""
    relativity = np.ones(len(rows.exposure))
    described: dict[str, Any] = {}
    for name, k in scenario.tariff_shrink.items():
        f = scenario.factor(name)
        true_pp = factors[name]["relativities"]["pure_premium"]
        table = np.array([true_pp[label] for label in f.labels]) ** k
        relativity *= table[f.label_codes(rows.values[name])]
        described[name] = {"shrink": k, "relativities": dict(zip(f.labels, table))}
    base_rate = expected_amount / (scenario.expected_loss_ratio * float(np.sum(rows.exposure * relativity)))
    premium = np.maximum(np.round(base_rate * relativity * rows.exposure, 2), 0.01)
    return premium, {"expected_loss_ratio": scenario.expected_loss_ratio, "base_rate": base_rate,
                     "factors": described}


def _policy_ids(n: int) -> np.ndarray:
    """'P0000001', 'P0000002', ... (at least seven digits)."""
    width = max(7, len(str(n)))
    return np.char.add("P", np.char.zfill(np.arange(1, n + 1).astype(str), width))


def _checked_override(value: Any, name: str, low: int) -> int:
    if not isinstance(value, int) or isinstance(value, bool) or value < low:
        raise InputError(f"{name} must be an integer >= {low}, got {value!r}")
    return value


def generate(scenario: Scenario, policies: int | None = None, seed: int | None = None) -> SimulatedBook:
    """Draw the book of `scenario` (its default `policies` and `seed` unless given) with its truth."""
    n = scenario.policies if policies is None else _checked_override(policies, "policies", 1)
    s = scenario.seed if seed is None else _checked_override(seed, "seed", 0)
    rng = np.random.default_rng(s)
    policy, period, exposure = _exposure_rows(rng, n, len(scenario.periods), scenario.new_business_share,
                                              scenario.lapse_share)
    raw = _draw_factors(rng, scenario.factors, n)
    rows = _Rows(policy, period, exposure,
                 {f.name: f.value(raw[f.name][policy], period) for f in scenario.factors})
    effects = _effects(scenario, rows.values)
    counts = rng.poisson(exposure * effects.frequency)
    amounts, large_claims = _claim_amounts(rng, scenario, counts, effects.severity_relativity)

    mean_severity = _mean_severity(scenario)
    expected_claims = float(np.sum(exposure * effects.frequency))
    expected_amount = float(np.sum(exposure * effects.frequency * effects.severity_relativity)) * mean_severity
    per_factor = {f.name: _factor_truth(f, rows.values[f.name], exposure, effects) for f in scenario.factors}
    factors = {name: entry for name, (entry, _) in per_factor.items()}
    at_base = {t: math.prod(at[t] for _, at in per_factor.values()) for t in ("frequency", "severity", "pure_premium")}
    premium, tariff = _current_premium(scenario, rows, factors, expected_amount)

    book = pd.DataFrame({"policy_id": _policy_ids(n)[policy],
                         "year": np.asarray(scenario.periods, dtype=np.int64)[period],
                         "exposure": exposure, "claim_count": counts.astype(np.int64), "claim_amount": amounts})
    for f in scenario.factors:
        v = rows.values[f.name]
        book[f.name] = (v.astype(np.int64) if f.writes_integers else v) if f.numeric \
            else np.asarray(f.labels, dtype=object)[v]
    book[PREMIUM_COLUMN] = premium
    truth = _truth(scenario, n, s, rows, factors, at_base, effects, expected_claims, expected_amount, tariff)
    return SimulatedBook(book, truth, large_claims)


def _truth(scenario: Scenario, n: int, seed: int, rows: _Rows, factors: dict[str, dict],
           at_base: dict[str, float], effects: _Effects, expected_claims: float, expected_amount: float,
           tariff: dict) -> dict:
    """The content of truth.json; `at_base` is the product over factors of their unnormalised
    averages at the base level/band, per target."""
    mean_severity = _mean_severity(scenario)
    ll = scenario.large_losses
    large = {"probability": 0.0, "share_of_amounts": 0.0} if ll is None else {
        "probability": ll.probability, "distribution": ll.distribution, **ll.parameters, "mean": ll.mean,
        "share_of_amounts": ll.probability * ll.mean / mean_severity}
    exposure = float(rows.exposure.sum())
    return {
        "format": "premiumlab.simulation-truth", "version": 1,
        "scenario": scenario.name, "description": scenario.description, "caution": CAUTION,
        "seed": seed, "policies": n, "rows": len(rows.exposure), "periods": list(scenario.periods),
        "units": {"frequency": "claims per policy-year", "severity": "currency per claim",
                  "pure_premium": "currency per policy-year"},
        "scenario_base": {"frequency": scenario.base_frequency, "attritional_severity": scenario.base_severity,
                          "severity": mean_severity, "pure_premium": scenario.base_frequency * mean_severity},
        "base": {"frequency": scenario.base_frequency * at_base["frequency"],
                 "attritional_severity": scenario.base_severity * at_base["severity"],
                 "severity": mean_severity * at_base["severity"],
                 "pure_premium": scenario.base_frequency * mean_severity * at_base["pure_premium"]},
        "book": {"exposure": exposure, "expected_claims": expected_claims,
                 "expected_frequency": expected_claims / exposure, "expected_amount": expected_amount,
                 "expected_pure_premium": expected_amount / exposure},
        "large_losses": large,
        "factors": factors,
        "interaction": _interaction_truth(scenario, rows, effects),
        "current_tariff": tariff,
    }


# --------------------------------------------------------------------------------------------
# files

def _book_format(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return "csv"
    if suffix in (".parquet", ".pq"):
        return "parquet"
    raise InputError(f"{path}: the book must end in .csv or .parquet")


def simulate(scenario_path: str | Path, out_path: str | Path, policies: int | None = None,
             seed: int | None = None) -> dict:
    """Simulate the scenario's book into `out_path` (CSV or Parquet by extension) and write
    `truth.json` beside it (both replaced if present). Returns a summary: paths, policies, rows,
    claims, large claims, exposure (policy-years) and total claim amount."""
    scenario = load_scenario(scenario_path)
    out = Path(out_path)
    fmt = _book_format(out)
    truth_path = out.with_name(TRUTH_FILE)
    if out.name == TRUTH_FILE:
        raise InputError(f"{out}: the book cannot be named {TRUTH_FILE}")
    if not out.parent.is_dir():
        raise InputError(f"{out}: the folder {out.parent} does not exist")
    result = generate(scenario, policies, seed)
    if fmt == "csv":
        result.book.to_csv(out, index=False, lineterminator="\n")
    else:
        result.book.to_parquet(out, index=False)
    write_json(truth_path, result.truth)
    book = result.book
    return {"book": str(out), "truth": str(truth_path), "policies": result.truth["policies"],
            "rows": len(book), "claims": int(book["claim_count"].sum()), "large_claims": result.large_claims,
            "exposure": float(book["exposure"].sum()), "claim_amount": float(book["claim_amount"].sum())}
