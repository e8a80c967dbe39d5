"""The selections file: an actuary's judgements on an indicated table, read and checked at the edge.

A TOML file (docs/commands.md, `premiumlab select`) with an optional `[every_factor]` table of rules
for every main factor and one `[factor.NAME]` table per factor with its own rules; a factor's own
key wins over `[every_factor]`'s. Every rule carries a reason: the factor's `reason`, or for a rule
inherited from `[every_factor]` that table's `reason`; every override has its own. Nothing here
knows the table: factor names and band labels are checked against it by `premiumlab.tabulation.select`.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from premiumlab._core.toml_schema import TomlTable, read_toml

#: The complements of a credibility-weighted selection: the current table's relativity, or 1.
CREDIBILITY_COMPLEMENTS = ("current", "one")
#: The ways to give a numeric factor's band edges.
EDGE_CHOICES = ("spec", "found")
#: Keys `[every_factor]` may give (rules that make sense for every factor).
EVERY_FACTOR_KEYS = ("cap", "credibility", "smooth", "reason")
#: The largest cap on a change, as a share (a cap of 1 allows any fall and a doubling).
MAX_CAP = 1.0
#: The widest smoothing window, in bands.
MAX_SMOOTH = 15


@dataclass(frozen=True)
class Override:
    """One band or level set by hand: `at` is a band label (`[25, 30)`), a level, or `(missing)`."""

    at: str
    relativity: float
    reason: str


@dataclass(frozen=True)
class FactorRules:
    """The selections on one main factor, applied in the order of the fields (docs/commands.md).

    edges: None (keep the table's bands), "spec" (the spec's edges), "found" (the table's edges,
    rounded to `round_edges_to` when given) or explicit interior edges; keep_current: the factor
    takes the current table's relativities; credibility: None, or the complement of
    r = indicated^Z x complement^(1 - Z); smooth: None or an odd window of bands; cap: None or the
    largest change either way against the current relativity, as a share; overrides: bands or levels
    set by hand. `reasons` gives the reason of each rule (by field name); `source` is the file.
    """

    factor: str
    source: str = ""
    edges: str | tuple[float, ...] | None = None
    round_edges_to: float | None = None
    keep_current: bool = False
    credibility: str | None = None
    smooth: int | None = None
    cap: float | None = None
    overrides: tuple[Override, ...] = ()
    reasons: tuple[tuple[str, str], ...] = ()

    def reason(self, rule: str) -> str:
        """The reason given for `rule` (a field name)."""
        return dict(self.reasons)[rule]

    @property
    def needs_current(self) -> bool:
        """True when a rule compares with, or takes, the current table."""
        return self.keep_current or self.cap is not None or self.credibility == "current"


@dataclass(frozen=True)
class Selections:
    """Every factor's rules (`factors`, in file order) and the rules of `[every_factor]` (`every`),
    which apply to the table's other main factors too."""

    path: str
    every: FactorRules | None
    factors: tuple[FactorRules, ...]

    def rules_for(self, factor: str) -> FactorRules | None:
        """The rules of `factor`: its own, else `[every_factor]`'s under its name, else None."""
        for rules in self.factors:
            if rules.factor == factor:
                return rules
        if self.every is None:
            return None
        return FactorRules(
            factor,
            source=self.path,
            credibility=self.every.credibility,
            smooth=self.every.smooth,
            cap=self.every.cap,
            reasons=self.every.reasons,
        )


def _reason(t: TomlTable, key: str = "reason") -> str | None:
    return t.string(key, None) if t.has(key) else None


def _rules(t: TomlTable, name: str, inherited: FactorRules | None) -> FactorRules:
    """The rules of one table ([every_factor] when `inherited` is None and name is '*')."""
    own_reason = _reason(t)
    if own_reason is not None and not own_reason.strip():
        raise t.error("reason", "must say why (it is empty)")
    values: dict[str, object] = {}
    if t.has("cap"):
        values["cap"] = t.number("cap", low=0.0, high=MAX_CAP)
    if t.has("credibility"):
        values["credibility"] = t.string("credibility", choices=CREDIBILITY_COMPLEMENTS)
    if t.has("smooth"):
        window = t.integer("smooth", low=3)
        if window % 2 == 0 or window > MAX_SMOOTH:
            raise t.error("smooth", f"must be an odd number of bands from 3 to {MAX_SMOOTH}, got {window}")
        values["smooth"] = window
    if name != "*":
        if t.has("edges"):
            edges = t.value("edges")
            if isinstance(edges, str):
                values["edges"] = t.string("edges", choices=EDGE_CHOICES)
            else:
                values["edges"] = tuple(t.numbers("edges", what="a list of band edges"))
        if t.has("round_edges_to"):
            if values.get("edges") != "found":
                raise t.error("round_edges_to", 'needs edges = "found" (it rounds the table\'s own edges)')
            values["round_edges_to"] = t.number("round_edges_to", low=0.0, low_open=True)
        if t.has("keep_current"):
            values["keep_current"] = t.boolean("keep_current")
            if values["keep_current"] and any(k in values for k in ("cap", "credibility", "smooth")):
                raise t.error("keep_current", "takes the current relativities: give no cap, credibility or smooth")
    reasons = {rule: own_reason for rule in values if rule != "round_edges_to"}
    missing = [rule for rule, why in reasons.items() if why is None]
    if missing:
        raise t.error("reason", f"is required: every selection says why (the rule '{missing[0]}' has none)")
    overrides = []
    if name != "*" and t.has("override"):
        entries = t.value("override")
        if not isinstance(entries, list):
            raise t.error("override", "must be an array of tables ([[factor.NAME.override]])")
        for i, entry in enumerate(entries):
            o = TomlTable(entry, t.source, t.key_path(f"override[{i}]"))
            at = o.string("band", None) if o.has("band") else o.string("level", None) if o.has("level") else None
            if at is None:
                raise o.error("band", "or 'level' is required: the band label or level to set")
            why = o.string("reason")
            if not why.strip():
                raise o.error("reason", "must say why (it is empty)")
            overrides.append(Override(at, o.number("relativity", low=0.0, low_open=True), why))
            o.refuse_unknown()
    if inherited is not None:  # keys the factor leaves out come from [every_factor], with its reason
        for rule in ("cap", "credibility", "smooth"):
            if rule not in values and getattr(inherited, rule) is not None and not values.get("keep_current"):
                values[rule] = getattr(inherited, rule)
                reasons[rule] = inherited.reason(rule)
    t.refuse_unknown()
    return FactorRules(
        name,
        source=t.source,
        overrides=tuple(overrides),
        reasons=tuple((rule, str(why)) for rule, why in reasons.items()),
        **values,  # type: ignore[arg-type]
    )


def read_selections(path: str | Path) -> Selections:
    """The selections file at `path`, every key checked (docs/commands.md, `premiumlab select`).

    Parameters
    ----------
    path : str or Path
        A TOML file with `[every_factor]` and `[factor.NAME]` tables.

    Returns
    -------
    Selections
        The rules of `[every_factor]` (None without it) and of each factor, in file order.

    Raises
    ------
    InputError
        One line naming the file and the dotted key: an unknown key, a value of the wrong type or
        out of its bounds (cap in [0, 1], smooth an odd window 3 to 15, an override's relativity
        > 0), a rule without a reason, `round_edges_to` without `edges = "found"`, or
        `keep_current` with another rule.
    """
    source = str(path)
    doc = TomlTable(read_toml(path, "selections"), source)
    every = _rules(doc.table("every_factor"), "*", None) if doc.has("every_factor") else None
    factors = []
    if doc.has("factor"):
        table = doc.table("factor")
        for name in table.all_keys():
            factors.append(_rules(table.table(name), name, every))
    doc.refuse_unknown()
    if every is None and not factors:
        raise doc.error("factor", "or 'every_factor' is required: the file selects nothing")
    return Selections(source, every, tuple(factors))
