"""Reading TOML input files by key: typed reads with bounds, defaults, and refusal of unknown keys.

The pricing spec and the simulator's scenario are both read through `TomlTable`. Every refusal is
an `InputError` of one line naming the file and the dotted key, e.g.
``spec.toml: key 'split.seed' must be an integer, got 'seven'``; an unknown key names the nearest
known key (`difflib`) and every key allowed where it stands.
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import tomllib
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from premiumlab._core.errors import InputError

#: Default of a read that has none: the key must be given.
REQUIRED: Any = object()
#: The deepest nesting of tables and arrays a TOML input file may have (a spec needs 3).
MAX_DEPTH = 32
#: Every integer read is at most this in size (int64), whatever its own bound.
INTEGER_LIMIT = 2**63 - 1


def _check_document(doc: dict, path: Path) -> None:
    """Refuse a document nested deeper than MAX_DEPTH tables and arrays, or holding a bare TOML date,
    time or date-time (every date premiumlab reads is a quoted "YYYY-MM-DD" string, and a bare one
    could not be copied into run.json), naming its dotted key; walked without recursion."""
    stack: list[tuple[Any, str, int]] = [(doc, "", 0)]
    while stack:
        value, key, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise InputError(f"{path}: TOML nested too deeply (at most {MAX_DEPTH} levels)")
        if isinstance(value, (dt.date, dt.time)):
            raise InputError(
                f"{path}: key '{key}' is a bare TOML date or time ({value.isoformat()}); write dates as "
                f'quoted strings, "YYYY-MM-DD"'
            )
        if isinstance(value, dict):
            stack.extend((v, f"{key}.{k}" if key else str(k), depth + 1) for k, v in value.items())
        elif isinstance(value, list):
            stack.extend((v, f"{key}[{i}]", depth + 1) for i, v in enumerate(value))


def read_toml(path: str | Path, kind: str) -> dict:
    """The TOML document of the file at `path` (UTF-8, a byte-order mark allowed).

    Parameters
    ----------
    path : str or Path
        The file.
    kind : str
        What the file is, for messages ("spec", "scenario").

    Returns
    -------
    dict
        The parsed document.

    Raises
    ------
    InputError
        When the file is missing, a directory, unreadable, not UTF-8, not valid TOML, nested
        deeper than MAX_DEPTH tables and arrays, or holding a bare TOML date or time.
    """
    p = Path(path)
    if p.is_dir():
        raise InputError(f"{p}: is a directory, expected a {kind} TOML file")
    try:
        text = p.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{p}: {kind} file not found") from None
    except UnicodeDecodeError as e:
        raise InputError(f"{p}: not UTF-8 text (byte {e.start})") from None
    except OSError as e:
        raise InputError(f"{p}: cannot read {kind} ({e.strerror})") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"{p}: malformed TOML: {e}") from None
    except ValueError as e:  # an integer of more digits than Python converts (sys.get_int_max_str_digits)
        raise InputError(f"{p}: a number cannot be read ({str(e).split(';')[0]})") from None
    except RecursionError:
        raise InputError(f"{p}: TOML nested too deeply (at most {MAX_DEPTH} levels)") from None
    _check_document(doc, p)
    return doc


def is_number(value: Any) -> bool:
    """True for a TOML integer or float (not a boolean)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


class TomlTable:
    """One table of a TOML document, read key by key.

    Every key asked for (read, tested with `has`, or named in `allow`) becomes known here; `refuse_unknown` then
    refuses any other key of the table. A read with no default requires the key.

    Parameters
    ----------
    data : Any
        The table's value in the document (refused unless a dict).
    source : str
        The file, for messages.
    path : str
        The table's dotted key in the document ("" for the document itself).
    what : str
        What a table here must be, for the message when `data` is not one.
    """

    def __init__(self, data: Any, source: str, path: str = "", what: str = "a table") -> None:
        if not isinstance(data, dict):
            raise InputError(f"{source}: key '{path}' must be {what}, got {data!r}")
        self.data, self.source, self.path = data, source, path
        self.known: set[str] = set()

    # ---- messages

    def key_path(self, key: str) -> str:
        """The dotted key of `key` in the document (`key` may carry an index, "bands[1]")."""
        return f"{self.path}.{key}" if self.path else key

    def error(self, key: str, message: str) -> InputError:
        """The refusal of `key`: "FILE: key 'DOTTED.KEY' MESSAGE" (no space before a leading ':')."""
        separator = "" if message.startswith(":") else " "
        return InputError(f"{self.source}: key '{self.key_path(key)}'{separator}{message}")

    # ---- keys

    def has(self, key: str) -> bool:
        """True when the table gives `key` (which becomes known)."""
        self.known.add(key)
        return key in self.data

    def all_keys(self) -> list[str]:
        """Every key of the table, in file order; all become known."""
        self.known.update(self.data)
        return list(self.data)

    def allow(self, keys: Iterable[str]) -> None:
        """Make `keys` known: the keys this table may hold besides those read."""
        self.known.update(keys)

    def refuse_unknown(self) -> None:
        """Refuse the first key of the table that is not known, naming its nearest known key."""
        unknown = [k for k in self.data if k not in self.known]
        if not unknown:
            return
        near = difflib.get_close_matches(unknown[0], sorted(self.known), n=1)
        hint = f" (did you mean '{self.key_path(near[0])}'?)" if near else ""
        allowed = f"; allowed here: {', '.join(sorted(self.known))}" if self.known else ""
        raise self.error(unknown[0], f"is unknown{hint}{allowed}")

    def value(self, key: str, default: Any = REQUIRED) -> Any:
        """The value of `key` as written, or `default`; without a default the key is required (the
        message names a similar unknown key given instead)."""
        self.known.add(key)
        if key in self.data:
            return self.data[key]
        if default is REQUIRED:
            near = difflib.get_close_matches(key, [k for k in self.data if k not in self.known], n=1)
            raise self.error(key, "is required" + (f" (unknown key '{self.key_path(near[0])}' given)" if near else ""))
        return default

    # ---- typed reads

    def number(
        self,
        key: str,
        default: Any = REQUIRED,
        *,
        low: float | None = None,
        high: float | None = None,
        low_open: bool = False,
        high_open: bool = False,
    ) -> float:
        """A finite number within [low, high] (`low_open`/`high_open` exclude the bound), as float."""
        return _number(self, key, self.value(key, default), low, high, low_open, high_open)

    def integer(self, key: str, default: Any = REQUIRED, *, low: int | None = None, high: int | None = None) -> int:
        """An integer (not a boolean) >= `low` and <= `high` (always at most INTEGER_LIMIT in size)."""
        value = self.value(key, default)
        if not isinstance(value, int) or isinstance(value, bool):
            raise self.error(key, f"must be an integer, got {_shown(value)}")
        if low is not None and value < low:
            raise self.error(key, f"must be >= {low}, got {_shown(value)}")
        top = INTEGER_LIMIT if high is None else min(high, INTEGER_LIMIT)
        if value > top or value < -INTEGER_LIMIT:
            raise self.error(
                key, f"must be {'<= ' + str(top) if value > 0 else 'an integer of int64 size'}, got {_shown(value)}"
            )
        return value

    def boolean(self, key: str, default: Any = REQUIRED) -> bool:
        """true or false."""
        value = self.value(key, default)
        if not isinstance(value, bool):
            raise self.error(key, f"must be true or false, got {value!r}")
        return value

    def string(
        self, key: str, default: Any = REQUIRED, *, choices: tuple[str, ...] | None = None, nonempty: bool = False
    ) -> str:
        """A string, one of `choices` when given; `nonempty` refuses ""."""
        return _string(self, key, self.value(key, default), choices, nonempty)

    def date(self, key: str, default: Any = REQUIRED) -> str:
        """A date, a TOML date or a string YYYY-MM-DD, as the ISO string."""
        value = self.value(key, default)
        text = value.isoformat() if isinstance(value, dt.date) and not isinstance(value, dt.datetime) else value
        try:
            dt.date.fromisoformat(text)
        except (TypeError, ValueError):
            raise self.error(key, f"must be a date YYYY-MM-DD, got {value!r}") from None
        return text

    def array(self, key: str, default: Any = REQUIRED, *, what: str = "a list") -> list:
        """A list (or, from a default, a tuple) as a list; `what` describes it in the message."""
        value = self.value(key, default)
        if not isinstance(value, (list, tuple)):
            raise self.error(key, f"must be {what}, got {value!r}")
        return list(value)

    def numbers(
        self, key: str, default: Any = REQUIRED, *, what: str = "a list of numbers", allow_inf: bool = False
    ) -> tuple[float, ...]:
        """A list of finite numbers (`allow_inf`: +-inf too), as floats; a bad item is named by its
        index, "bands[1]"."""
        items = self.array(key, default, what=what)
        out = []
        for i, item in enumerate(items):
            if not is_number(item):
                raise self.error(f"{key}[{i}]", f"must be a number, got {item!r}")
            if math.isnan(item) or (math.isinf(item) and not allow_inf):
                raise self.error(f"{key}[{i}]", f"must be finite, got {item!r}")
            out.append(float(item))
        return tuple(out)

    def strings(
        self,
        key: str,
        default: Any = REQUIRED,
        *,
        what: str = "a list of strings",
        nonempty: bool = False,
        distinct: str | None = None,
    ) -> tuple[str, ...]:
        """A list of strings (`nonempty`: no ""); with `distinct` (a noun, "level") no string twice."""
        items = tuple(
            _string(self, f"{key}[{i}]", item, None, nonempty)
            for i, item in enumerate(self.array(key, default, what=what))
        )
        if distinct is not None and len(set(items)) != len(items):
            twice = next(v for v in items if items.count(v) > 1)
            raise self.error(key, f"lists {distinct} '{twice}' twice")
        return items

    def table(self, key: str, default: Any = REQUIRED, *, what: str = "a table") -> TomlTable:
        """The sub-table at `key` (from `default`, e.g. {}, when absent)."""
        return TomlTable(self.value(key, default), self.source, self.key_path(key), what)

    def optional_table(self, key: str, *, what: str = "a table") -> TomlTable | None:
        """The sub-table at `key`, or None when the key is absent."""
        return self.table(key, what=what) if self.has(key) else None


def _shown(value: Any) -> str:
    """`value` for a message, cut to 40 characters (a 5,000-digit number stays one short line)."""
    text = repr(value)
    return text if len(text) <= 40 else f"{text[:37]}... ({len(text)} characters)"


def _number(
    t: TomlTable, key: str, value: Any, low: float | None, high: float | None, low_open: bool, high_open: bool
) -> float:
    if not is_number(value):
        raise t.error(key, f"must be a number, got {value!r}")
    v = float(value)
    if not math.isfinite(v):
        raise t.error(key, f"must be finite, got {value!r}")
    if low is not None and (v < low or (low_open and v == low)):
        raise t.error(key, f"must be {'>' if low_open else '>='} {low:g}, got {value!r}")
    if high is not None and (v > high or (high_open and v == high)):
        raise t.error(key, f"must be {'<' if high_open else '<='} {high:g}, got {value!r}")
    return v


def _string(t: TomlTable, key: str, value: Any, choices: tuple[str, ...] | None, nonempty: bool) -> str:
    if not isinstance(value, str) or (nonempty and not value):
        raise t.error(key, f"must be a {'non-empty ' if nonempty else ''}string, got {value!r}")
    if choices is not None and value not in choices:
        raise t.error(key, f"must be one of {', '.join(choices)}, got {value!r}")
    return value
