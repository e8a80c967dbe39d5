"""The scenario file: a TOML description of an invented portfolio -> a typed `Scenario`.

Scenario keys (every key; anything else is refused with an `InputError` naming the key)
-----------------------------------------------------------------------------------------
[scenario]
  name               string, required: identifier written to truth.json
  description        string, default "": one line about the invented portfolio
  policies           integer 1 .. 50,000,000 (MAX_POLICIES), required: default number of policies
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
  generate           optional table, instead of levels, probabilities and the two relativity
                     tables: many generated levels (e.g. territories), keys:
    count            integer >= 2, required: number of levels
    prefix           string, default "": level k (1-based) is named prefix + k zero-padded to the
                     width of count ("T001" ... "T300")
    exposure_skew    number >= 0, default 1: level k has probability p_k proportional to
                     exp(exposure_skew x z_k), z_k = Phi^-1((count - k + 0.5) / count) (the count
                     quantiles of a lognormal law with log-sd exposure_skew, largest level first;
                     0 = equal levels). With 300 levels, 1.8 puts about 30 % of the levels under 50
                     policies in a book of 200,000 and about 6 % of the exposure under 200 policies
    frequency_sigma  number >= 0, default 0: true frequency relativity r_k = exp(sigma x e_k) / c,
                     e_k independent standard normal draws, c = sum_j p_j exp(sigma x e_j) so that the
                     probability-weighted mean relativity sum_k p_k r_k is 1 (0 = no effect)
    severity_sigma   number >= 0, default 0: the same for severity
                     The draws e_k come from a stream of the scenario's `seed` (never the book's
                     seed override) of their own, so the truth is the scenario's and shifts no other
                     draw; truth.json lists every level's probability and relativities (`generated`)
  missing            optional table: the factor's value is missing on some policies (on all of a
                     policy's rows); in the book an empty cell (CSV) or null (Parquet), numeric
                     values NaN or null. Keys:
    share            number in [0, 1), required: probability that a policy's value is missing
                     (outside the more_often_when group)
    frequency_relativity  number > 0, default 1: true frequency relativity of a missing value, on the
                     scale of this factor's relativities (a categorical `frequency_relativity`, or
                     exp of a numeric curve): it replaces the factor's effect on those rows
    severity_relativity   number > 0, default 1: the same for severity
    more_often_when  optional table {factor, level, share}: policies whose other factor `factor`
                     has level (or band label) `level` (true value, in the policy's first period)
                     lose the value with probability `share` in [0, 1) instead
                     Missingness is drawn from a stream of the book's seed of its own (after the
                     values), so it shifts no other draw. The interaction and the factors that
                     depend on this one use the true value; the current tariff rates a missing
                     value with the missing group's true relativity. truth.json gives the factor a
                     `missing` entry: the keys above, the exposure, policies and shares missing, and
                     the missing group's relativities normalised to the factor's base

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
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from premiumlab._core.toml_schema import REQUIRED, TomlTable, is_number, read_toml
from premiumlab.book.bands import band_labels
from premiumlab.simulation.scenario import (
    DISTRIBUTION_PARAMETERS,
    GENERATED_LEVELS_STREAM,
    LEAD_COLUMNS,
    PREMIUM_COLUMN,
    Distribution,
    Factor,
    GeneratedLevels,
    Interaction,
    LargeLosses,
    Missing,
    Scenario,
    side_stream,
)

#: The most policies a book may be drawn with (scenario `policies`, `simulate --policies`): about
#: 10 GB of rows at the simulator's peak, beyond any test book.
MAX_POLICIES = 50_000_000


def _names(t: TomlTable, key: str, noun: str) -> tuple[str, ...]:
    """A list of distinct non-empty names (levels, factors); `noun` names one in messages."""
    return t.strings(key, what="a list of non-empty strings", nonempty=True, distinct=noun)


def _increasing(t: TomlTable, key: str, values: tuple[float, ...], what: str = "values") -> None:
    if any(b <= a for a, b in zip(values, values[1:])):
        raise t.error(key, f"must have strictly increasing {what}, got {[float(v) for v in values]!r}")


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file.

    Parameters
    ----------
    path : str or Path
        The scenario file.

    Returns
    -------
    Scenario
        The typed scenario; a missing or malformed file or bad content raises `InputError` naming
        the file and the key.
    """
    return parse_scenario(read_toml(path, "scenario"), str(Path(path)))


def parse_scenario(doc: dict, source: str = "scenario") -> Scenario:
    """Validate a scenario already read from TOML.

    Parameters
    ----------
    doc : dict
        The TOML document.
    source : str
        The file it came from, for messages.

    Returns
    -------
    Scenario
        The typed scenario; bad content raises `InputError` naming the file and the dotted key.
    """
    top = TomlTable(doc, source)
    s = top.table("scenario")
    head: dict[str, Any] = dict(
        name=s.string("name", nonempty=True),
        description=s.string("description", ""),
        policies=s.integer("policies", low=1, high=MAX_POLICIES),
        seed=s.integer("seed", low=0),
        periods=_periods(s),
        base_frequency=s.number("base_frequency", low=0, low_open=True),
        base_severity=s.number("base_severity", low=0, low_open=True),
        severity_shape=s.number("severity_shape", 1.5, low=0, low_open=True),
        new_business_share=s.number("new_business_share", 0.15, low=0, high=1),
        lapse_share=s.number("lapse_share", 0.10, low=0, high=1),
    )
    s.refuse_unknown()

    factors_table = top.table("factors")
    factors: list[Factor] = []
    missing_tables: list[TomlTable | None] = []
    for name in factors_table.all_keys():
        if name in LEAD_COLUMNS or name == PREMIUM_COLUMN:
            raise factors_table.error(name, "clashes with a column the simulator writes")
        factor, missing_table = _parse_factor(factors_table.table(name), name, factors, head["seed"])
        factors.append(factor)
        missing_tables.append(missing_table)
    if not factors:
        raise top.error("factors", "must define at least one factor")
    factors_table.refuse_unknown()
    factors = [
        f if t is None else replace(f, missing=_parse_missing(t, f, factors)) for f, t in zip(factors, missing_tables)
    ]

    large = top.optional_table("large_losses")
    interaction = top.optional_table("interaction")
    tariff = top.optional_table("current_tariff")
    loss_ratio, shrink = _parse_tariff(tariff, factors)
    scenario = Scenario(
        **head,
        factors=tuple(factors),
        large_losses=None if large is None else _parse_large_losses(large),
        interaction=None if interaction is None else _parse_interaction(interaction, factors),
        expected_loss_ratio=loss_ratio,
        tariff_shrink=shrink,
    )
    top.refuse_unknown()
    return scenario


def _periods(s: TomlTable) -> tuple[int, ...]:
    value = s.value("periods")
    if (
        not isinstance(value, list)
        or not value
        or not all(isinstance(v, int) and not isinstance(v, bool) for v in value)
    ):
        raise s.error("periods", f"must be a non-empty list of integers, got {value!r}")
    if any(b != a + 1 for a, b in zip(value, value[1:])):
        raise s.error("periods", f"must be consecutive integers, got {value!r}")
    return tuple(value)


def _parse_factor(t: TomlTable, name: str, earlier: list[Factor], seed: int) -> tuple[Factor, TomlTable | None]:
    """The factor (without its missing values) and its `missing` table, read once every factor is
    known; `seed` is the scenario's, for generated levels."""
    ftype = t.string("type", choices=("numeric", "categorical"))
    depends_on = t.value("depends_on", None)
    parent = None
    if depends_on is not None:
        parent = next((f for f in earlier if f.name == depends_on), None)
        if parent is None:
            raise t.error("depends_on", f"must name a factor defined above this one, got {depends_on!r}")
    parsed = _parse_numeric(t) if ftype == "numeric" else _parse_categorical(t, seed, len(earlier))
    labels = parsed["labels"]
    base = t.value("base", None)
    if base is not None and base not in labels:
        raise t.error("base", f"must be one of {', '.join(labels)}, got {base!r}")
    when: dict[str, Distribution] = {}
    when_table = t.optional_table("when")
    if when_table is None and parent is not None:
        raise t.error("depends_on", f"needs at least one [{t.path}.when.LABEL] table")
    if when_table is not None:
        if parent is None:
            raise t.error("when", "needs depends_on")
        for label in when_table.all_keys():
            if label not in parent.labels:
                raise when_table.error(
                    label, f"is not a level or band of {parent.name}: use one of {', '.join(parent.labels)}"
                )
            override = when_table.table(label)
            when[label] = _parse_distribution(override, parsed["distribution"], labels)
            override.refuse_unknown()
        when_table.refuse_unknown()
    missing = t.optional_table("missing")
    t.refuse_unknown()
    return Factor(name=name, type=ftype, base=base, depends_on=depends_on, when=when, **parsed), missing


def _parse_distribution(t: TomlTable, template: Distribution | str, levels: tuple[str, ...]) -> Distribution:
    """Parameters of `template`'s kind (a kind name, or a distribution whose values are defaults);
    the caller closes `t`."""
    kind = template if isinstance(template, str) else template.kind
    defaults = {} if isinstance(template, str) else template.parameters
    if kind == "levels":
        probs = t.numbers("probabilities", defaults.get("probabilities", REQUIRED))
        if len(probs) != len(levels) or any(p < 0 for p in probs) or abs(sum(probs) - 1.0) > 1e-9:
            raise t.error("probabilities", f"must hold {len(levels)} numbers >= 0 summing to 1, got {list(probs)!r}")
        return Distribution(kind, {"probabilities": probs})
    a, b = DISTRIBUTION_PARAMETERS[kind]
    if kind == "histogram":
        edges = t.numbers(a, defaults.get(a, REQUIRED))
        weights = t.numbers(b, defaults.get(b, REQUIRED))
        _increasing(t, a, edges)
        if len(edges) < 2:
            raise t.error(a, "needs at least two edges")
        if len(weights) != len(edges) - 1 or any(w < 0 for w in weights) or sum(weights) <= 0:
            raise t.error(b, f"must hold {len(edges) - 1} numbers >= 0 with a positive sum, got {list(weights)!r}")
        return Distribution(kind, {a: edges, b: weights})
    first = t.number(a, defaults.get(a, REQUIRED))
    second = t.number(b, defaults.get(b, REQUIRED))
    if kind in ("uniform", "integers") and (second < first or (kind == "uniform" and second == first)):
        raise t.error(b, f"must exceed {a} ({first:g}), got {second:g}")
    if kind == "integers" and not (first.is_integer() and second.is_integer()):
        raise t.error(a, "and high must be whole numbers")
    if kind in ("normal", "lognormal") and second <= 0:
        raise t.error(b, f"must be > 0, got {second:g}")
    if kind == "lognormal" and first <= 0:
        raise t.error(a, f"must be > 0, got {first:g}")
    return Distribution(kind, {a: first, b: second})


def _knots(t: TomlTable, key: str) -> np.ndarray | None:
    value = t.value(key, None)
    if value is None:
        return None
    ok = (
        isinstance(value, list)
        and value
        and all(
            isinstance(k, list) and len(k) == 2 and all(is_number(v) and math.isfinite(v) for v in k) for k in value
        )
    )
    if not ok:
        raise t.error(key, f"must be a list of [x, log-relativity] pairs of finite numbers, got {value!r}")
    knots = np.asarray(value, dtype=float)
    _increasing(t, key, tuple(knots[:, 0]), "x values")
    return knots


def _parse_numeric(t: TomlTable) -> dict[str, Any]:
    kind = t.string("distribution", choices=tuple(DISTRIBUTION_PARAMETERS))
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
    round_to = t.number("round_to", low=0, low_open=True) if t.has("round_to") else 1.0 if kind == "integers" else None
    if round_to is not None and clip is not None and not all((c / round_to).is_integer() for c in clip):
        raise t.error("clip", f"bounds must be multiples of round_to ({round_to:g}), got {list(clip)!r}")
    return dict(
        distribution=distribution,
        labels=tuple(band_labels(bands)),
        bands=bands,
        clip=clip,
        round_to=round_to,
        step_per_period=t.number("step_per_period", 0.0),
        frequency_knots=_knots(t, "frequency_curve"),
        severity_knots=_knots(t, "severity_curve"),
    )


def _relativities(t: TomlTable, key: str, levels: tuple[str, ...]) -> np.ndarray | None:
    table = t.optional_table(key)
    if table is None:
        return None
    values = np.array([table.number(level, low=0, low_open=True) for level in levels])
    table.refuse_unknown()
    return values


def _parse_categorical(t: TomlTable, seed: int, index: int) -> dict[str, Any]:
    generate = t.optional_table("generate")
    if generate is not None:
        return _parse_generated(generate, t, seed, index)
    levels = _names(t, "levels", "level")
    if len(levels) < 2:
        raise t.error("levels", f"must list at least two levels, got {list(levels)!r}")
    distribution = _parse_distribution(t, "levels", levels)
    return dict(
        distribution=distribution,
        labels=levels,
        frequency_relativity=_relativities(t, "frequency_relativity", levels),
        severity_relativity=_relativities(t, "severity_relativity", levels),
    )


def _parse_generated(g: TomlTable, factor: TomlTable, seed: int, index: int) -> dict[str, Any]:
    """A categorical factor's generated levels, probabilities and relativities (key `generate`)."""
    for key in ("levels", "probabilities", "frequency_relativity", "severity_relativity"):
        if factor.has(key):
            raise factor.error(key, "cannot be given with generate (the levels and their relativities are generated)")
    spec = GeneratedLevels(
        count=g.integer("count", low=2),
        prefix=g.string("prefix", ""),
        exposure_skew=g.number("exposure_skew", 1.0, low=0),
        frequency_sigma=g.number("frequency_sigma", 0.0, low=0),
        severity_sigma=g.number("severity_sigma", 0.0, low=0),
    )
    g.refuse_unknown()
    probabilities = spec.probabilities()
    frequency, severity = spec.relativities(side_stream(seed, GENERATED_LEVELS_STREAM, index), probabilities)
    return dict(
        distribution=Distribution("levels", {"probabilities": tuple(float(p) for p in probabilities)}),
        labels=spec.labels(),
        frequency_relativity=frequency,
        severity_relativity=severity,
        generated=spec,
    )


def _parse_missing(t: TomlTable, factor: Factor, factors: list[Factor]) -> Missing:
    """The factor's `missing` table; `factors` are all the scenario's (the group may be any other)."""
    share = t.number("share", low=0, high=1, high_open=True)
    frequency = t.number("frequency_relativity", 1.0, low=0, low_open=True)
    severity = t.number("severity_relativity", 1.0, low=0, low_open=True)
    group = t.optional_table("more_often_when")
    t.refuse_unknown()
    if group is None:
        return Missing(share, frequency, severity)
    name = group.string("factor", nonempty=True)
    other = next((f for f in factors if f.name == name and f is not factor), None)
    if other is None:
        raise group.error("factor", f"must name another factor of the scenario, got {name!r}")
    label = group.string("level")
    if label not in other.labels:
        shown = ", ".join(other.labels[:8]) + (", ..." if len(other.labels) > 8 else "")
        raise group.error("level", f"must be a level or band of {name} ({shown}), got {label!r}")
    group_share = group.number("share", low=0, high=1, high_open=True)
    group.refuse_unknown()
    return Missing(share, frequency, severity, name, label, group_share)


def _parse_large_losses(t: TomlTable) -> LargeLosses:
    probability = t.number("probability", low=0, high=1, high_open=True)
    kind = t.string("distribution", choices=("pareto", "lognormal"))
    if kind == "pareto":
        params = {
            "threshold": t.number("threshold", low=0, low_open=True),
            "shape": t.number("shape", low=1, low_open=True),
        }
    else:
        params = {"median": t.number("median", low=0, low_open=True), "sigma": t.number("sigma", low=0, low_open=True)}
    t.refuse_unknown()
    return LargeLosses(probability, kind, params)


def _parse_interaction(t: TomlTable, factors: list[Factor]) -> Interaction:
    names = _names(t, "factors", "factor")
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
            levels = _names(region_table, name, "level")
            unknown = [v for v in levels if v not in f.labels]
            if not levels or unknown:
                raise region_table.error(name, f"must list levels of {name}, got {list(levels)!r}")
            region[name] = tuple(f.labels.index(v) for v in levels)
    region_table.refuse_unknown()
    interaction = Interaction(
        names, region, t.number("frequency", 1.0, low=0, low_open=True), t.number("severity", 1.0, low=0, low_open=True)
    )
    t.refuse_unknown()
    return interaction


def _parse_tariff(t: TomlTable | None, factors: list[Factor]) -> tuple[float, dict[str, float]]:
    if t is None:
        return 0.7, {}
    loss_ratio = t.number("expected_loss_ratio", 0.7, low=0, low_open=True)
    shrink_table = t.optional_table("shrink")
    shrink: dict[str, float] = {}
    if shrink_table is not None:
        names = {f.name for f in factors}
        for name in shrink_table.all_keys():
            if name not in names:
                raise shrink_table.error(name, "is not a factor of the scenario")
            shrink[name] = shrink_table.number(name, low=0, high=1)
        shrink_table.refuse_unknown()
    t.refuse_unknown()
    return loss_ratio, shrink
