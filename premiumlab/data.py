"""Books of policies: reading CSV/Parquet in chunks, data checks, the seeded split, banding.

Row numbers in messages are 0-based data rows (the header is not counted), the same index that
`predictions.parquet` calls `row`.
"""
from __future__ import annotations

import hashlib
from collections.abc import Iterator
from dataclasses import dataclass, field, replace
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab.bands import assign_bands, banded, quantile_edges
from premiumlab.book_quantiles import book_quantile_edges
from premiumlab.cluster import TaskRunner
from premiumlab.errors import InputError
from premiumlab.progress import progress_bar
from premiumlab.spec import Factor, Spec

CHUNK_ROWS = 500_000
#: A level or band holding less than this share of the exposure is reported as thin.
THIN_LEVEL_SHARE = 0.005
#: A categorical factor with more levels than this is reported as having very many levels.
MANY_LEVELS = 100
#: Rows whose exposure exceeds this many terms are reported (exposure is usually at most one term).
TERM = 1.0
SHOW_ROWS = 5


@dataclass(frozen=True)
class Finding:
    """One data finding: `error` stops every command but `validate`; `warning` is reported only."""

    level: str
    column: str
    message: str

    def __str__(self) -> str:
        return f"{self.level}: {self.message}"


@dataclass
class Book:
    """A validated book, typed: numeric factors float64, categorical factors as strings."""

    path: str
    frame: pd.DataFrame
    exposure: np.ndarray
    claim_count: np.ndarray
    claim_amount: np.ndarray | None
    current_premium: np.ndarray | None
    policy: np.ndarray
    holdout: np.ndarray
    sha256: str
    warnings: list[Finding] = field(default_factory=list)

    @property
    def n_rows(self) -> int:
        return len(self.exposure)


# --------------------------------------------------------------------------------------------
# reading

def _book_files(path: Path) -> list[Path]:
    if not path.exists():
        raise InputError(f"{path}: book not found")
    if path.is_dir():
        parts = sorted(p for p in path.iterdir() if p.suffix.lower() in (".parquet", ".pq"))
        if not parts:
            raise InputError(f"{path}: is a directory with no .parquet parts; expected a CSV or Parquet book")
        return parts
    if path.suffix.lower() not in (".csv", ".parquet", ".pq"):
        raise InputError(f"{path}: unsupported book format '{path.suffix}'; use .csv or .parquet")
    return [path]


def book_sha256(path: str | Path) -> str:
    """sha256 over the bytes of the book file (or its Parquet parts in name order)."""
    h = hashlib.sha256()
    for part in _book_files(Path(path)):
        with open(part, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    return h.hexdigest()


def read_columns(path: str | Path) -> list[str]:
    """The column names of a book, read from its header or Parquet schema."""
    files = _book_files(Path(path))
    if files[0].suffix.lower() == ".csv":
        return list(_read_csv(files[0], nrows=0).columns)
    import pyarrow.parquet as pq
    try:
        return list(pq.read_schema(files[0]).names)
    except Exception as e:  # pyarrow raises several types for damaged files
        raise InputError(f"{files[0]}: not a readable Parquet file ({type(e).__name__}: {e})") from None


def _read_csv(path: Path, **kwargs) -> pd.DataFrame | Iterator[pd.DataFrame]:
    try:
        return pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig", **kwargs)
    except UnicodeDecodeError as e:
        raise InputError(f"{path}: not UTF-8 text (byte {e.start})") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{path}: empty file, no header row") from None
    except pd.errors.ParserError as e:
        raise InputError(f"{path}: malformed CSV ({str(e).strip().splitlines()[-1]})") from None


def iter_book(path: str | Path, columns: list[str], chunk_rows: int = CHUNK_ROWS
              ) -> Iterator[tuple[int, pd.DataFrame]]:
    """Yield (first row index, chunk) over the book; CSV values come as strings."""
    offset = 0
    for part in _book_files(Path(path)):
        if part.suffix.lower() == ".csv":
            # every column is read: with `usecols` pandas drops the extra fields of a ragged row silently
            reader = _read_csv(part, chunksize=chunk_rows)
            try:
                for chunk in reader:
                    yield offset, chunk[columns].reset_index(drop=True)
                    offset += len(chunk)
            except UnicodeDecodeError as e:
                raise InputError(f"{part}: not UTF-8 text (byte {e.start})") from None
            except pd.errors.ParserError as e:
                raise InputError(f"{part}: malformed CSV ({str(e).strip().splitlines()[-1]})") from None
        else:
            import pyarrow.parquet as pq
            try:
                pf = pq.ParquetFile(part, pre_buffer=False)  # pre-buffering would keep every row group read
                for batch in pf.iter_batches(batch_size=chunk_rows, columns=columns):
                    chunk = batch.to_pandas()
                    yield offset, chunk
                    offset += len(chunk)
            except InputError:
                raise
            except Exception as e:
                raise InputError(f"{part}: not a readable Parquet file ({type(e).__name__}: {e})") from None


# --------------------------------------------------------------------------------------------
# row checks (pure: a chunk in, findings out)

class _Collector:
    """Collects findings per (level, column, check) across chunks: counts add, first rows kept."""

    def __init__(self, source: str) -> None:
        self.source = source
        self.items: dict[tuple[str, str, str], list] = {}

    def add(self, level: str, column: str, check: str, mask: np.ndarray, offset: int) -> None:
        self.add_rows(level, column, check, np.flatnonzero(mask) + offset)

    def add_rows(self, level: str, column: str, check: str, rows: np.ndarray) -> None:
        """Record the rows (0-based, ascending) that fail one check."""
        if len(rows) == 0:
            return
        entry = self.items.setdefault((level, column, check), [0, []])
        entry[0] += len(rows)
        entry[1].extend(rows[: SHOW_ROWS - len(entry[1])].tolist())

    def note(self, level: str, column: str, message: str) -> None:
        self.items[(level, column, message)] = [None, []]

    def merge(self, later: "_Collector") -> None:
        """Add the findings of the rows that follow these in the book."""
        for key, (count, rows) in later.items.items():
            entry = self.items.setdefault(key, [0 if count is not None else None, []])
            if count is not None:
                entry[0] += count
                entry[1].extend(rows[: SHOW_ROWS - len(entry[1])])

    def findings(self) -> list[Finding]:
        out = []
        for (level, column, check), (count, rows) in self.items.items():
            if count is None:
                out.append(Finding(level, column, f"{self.source}: {check}"))
                continue
            shown = ", ".join(map(str, rows)) + (", ..." if count > len(rows) else "")
            out.append(Finding(level, column, f"{self.source}: column '{column}': {count} "
                                              f"row{'s' if count != 1 else ''} {check} (rows {shown})"))
        return out


def _to_number(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """(float values, mask of present-but-not-numeric entries); blanks become NaN, unmasked."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        return values.to_numpy(dtype=float, na_value=np.nan), np.zeros(len(values), dtype=bool)
    text = values.astype("string").str.strip()
    num = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    blank = (text.isna() | (text == "")).to_numpy(dtype=bool)
    bad = np.isnan(num) & ~blank & ~text.str.lower().isin(["nan"]).to_numpy(dtype=bool)
    return num, bad


def _as_text(values: pd.Series) -> np.ndarray:
    """Levels as strings ("01" stays "01", floats as %g); missing values become "".

    The text is made once per distinct value and shared by its rows, so a factor with few levels
    costs one pointer per row however long the book is.
    """
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    if pd.api.types.is_float_dtype(values):
        labels = pd.Series([format(v, "g") for v in uniques], dtype=object)
    else:
        labels = pd.Series(uniques).astype("string")
    text = np.append(labels.str.strip().to_numpy(dtype=object), "")  # code -1 (missing) -> ""
    return text[codes]


@dataclass
class _Typed:
    exposure: np.ndarray
    count: np.ndarray
    amount: np.ndarray | None
    premium: np.ndarray | None
    factors: dict[str, np.ndarray]
    policy: np.ndarray | None
    period: np.ndarray | None


def check_chunk(chunk: pd.DataFrame, offset: int, spec: Spec, out: _Collector) -> _Typed:
    """Type one chunk and record its row-level findings."""
    c = spec.columns
    expo, bad = _to_number(chunk[c.exposure])
    out.add("error", c.exposure, "with a non-numeric exposure", bad, offset)
    out.add("error", c.exposure, "with a missing exposure", np.isnan(expo) & ~bad, offset)
    out.add("error", c.exposure, "with a non-finite exposure", np.isinf(expo), offset)
    out.add("error", c.exposure, "with exposure <= 0", np.isfinite(expo) & (expo <= 0), offset)
    out.add("warning", c.exposure, f"with exposure above {TERM:g} term", np.isfinite(expo) & (expo > TERM),
            offset)

    count, bad = _to_number(chunk[c.claim_count])
    out.add("error", c.claim_count, "with a non-numeric claim count", bad, offset)
    out.add("error", c.claim_count, "with a missing or non-finite claim count", ~np.isfinite(count) & ~bad,
            offset)
    out.add("error", c.claim_count, "with a negative claim count", count < 0, offset)
    out.add("error", c.claim_count, "with a fractional claim count",
            np.isfinite(count) & (count != np.round(count)), offset)

    amount = None
    if c.claim_amount is not None:
        amount, bad = _to_number(chunk[c.claim_amount])
        out.add("error", c.claim_amount, "with a non-numeric claim amount", bad, offset)
        out.add("error", c.claim_amount, "with a missing or non-finite claim amount",
                ~np.isfinite(amount) & ~bad, offset)
        out.add("error", c.claim_amount, "with a negative claim amount", amount < 0, offset)
        out.add("error", c.claim_amount, f"with a positive amount but zero claims in '{c.claim_count}'",
                (amount > 0) & (count == 0), offset)
        out.add("warning", c.claim_amount, "with nil claims (claims but amount 0; excluded from severity)",
                (amount == 0) & (count > 0), offset)

    premium = None
    if c.current_premium is not None:
        premium, bad = _to_number(chunk[c.current_premium])
        out.add("error", c.current_premium, "with a non-numeric current premium", bad, offset)
        out.add("error", c.current_premium, "with a missing, non-finite or non-positive current premium",
                ~(np.isfinite(premium) & (premium > 0)) & ~bad, offset)

    factors: dict[str, np.ndarray] = {}
    for f in spec.factors:
        factors[f.name] = _check_factor(chunk[f.name], f, offset, out)
    policy = _as_text(chunk[c.policy_id]) if c.policy_id else None
    if policy is not None:
        out.add("error", c.policy_id, "with a missing policy id", policy == "", offset)
    period = _as_text(chunk[c.period]) if c.period else None
    if period is not None:
        out.add("error", c.period, "with a missing period", period == "", offset)
    return _Typed(expo, count, amount, premium, factors, policy, period)


def _check_factor(values: pd.Series, f: Factor, offset: int, out: _Collector) -> np.ndarray:
    if f.type == "numeric":
        num, bad = _to_number(values)
        out.add("error", f.name, "with a non-numeric value in a numeric factor", bad, offset)
        out.add("error", f.name, "with a missing value", np.isnan(num) & ~bad, offset)
        out.add("error", f.name, "with an infinite value", np.isinf(num), offset)
        return num
    text = _as_text(values)
    out.add("error", f.name, "with a missing value", text == "", offset)
    if f.levels is not None:
        unknown = ~pd.Series(text).isin(f.levels).to_numpy() & (text != "")
        out.add("error", f.name, f"with a level not in the spec's levels ({', '.join(f.levels)})", unknown,
                offset)
    return text


# --------------------------------------------------------------------------------------------
# book-level checks, from per-chunk tallies (memory grows with the distinct levels, not the rows)

def _sorted_codes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(sorted distinct values, position of each value among them), as np.unique(values,
    return_inverse=True) gives, found by hashing instead of sorting a copy of the column."""
    codes, uniques = pd.factorize(values, use_na_sentinel=False)
    uniques = np.asarray(uniques)
    order = np.argsort(uniques, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return uniques[order], rank[codes]


#: Columns of `LevelSums.sums`: rows, exposure, claim count and claim amount per distinct value.
SUMS = ("rows", "exposure", "claims", "amount")


@dataclass
class LevelSums:
    """Rows, exposure, claims and amount summed per distinct value of one factor (sorted values)."""

    values: np.ndarray
    sums: np.ndarray  # shape (len(values), len(SUMS))

    def merged(self, values: np.ndarray, sums: np.ndarray) -> "LevelSums":
        """These sums plus those of more distinct `values` (which may repeat ours)."""
        uniq, inv = _sorted_codes(np.concatenate([self.values, values]))
        return LevelSums(uniq, _sums_by(inv, np.concatenate([self.sums, sums]), len(uniq)))


def _sums_by(codes: np.ndarray, weights: np.ndarray, k: int) -> np.ndarray:
    """Column sums of `weights` (rows x columns) per code 0..k-1: shape (k, columns)."""
    return np.column_stack([np.bincount(codes, weights=weights[:, j], minlength=k)
                            for j in range(weights.shape[1])])


@dataclass
class BookSummary:
    """What the book-level checks and the profile need, summed chunk by chunk."""

    totals: np.ndarray  # the SUMS over the whole book
    has_amount: bool
    levels: dict[str, LevelSums]

    @property
    def rows(self) -> int:
        return int(self.totals[0])


def _finite(x: np.ndarray | None, n: int) -> np.ndarray:
    return np.zeros(n) if x is None else np.where(np.isfinite(x), x, 0.0)


def _usable_exposure(exposure: np.ndarray) -> np.ndarray:
    """Exposure where it is finite and > 0, else 0 (such rows are errors; sums stay finite)."""
    return np.where(np.isfinite(exposure) & (exposure > 0), exposure, 0.0)


def _row_weights(exposure: np.ndarray, count: np.ndarray | None, amount: np.ndarray | None) -> np.ndarray:
    """The SUMS of each row (rows x 4): 1, usable exposure, claims and amount (0 where missing)."""
    n = len(exposure)
    return np.column_stack([np.ones(n), _usable_exposure(exposure), _finite(count, n), _finite(amount, n)])


class _Tally:
    """Accumulates, chunk by chunk: sums per level of a categorical factor and per band of a numeric
    factor with `bands` (each band keyed by its lower edge, -inf for the first; a numeric factor
    without bands gets its band sums from `with_quantile_bands`), the smallest and largest value of
    each numeric factor, the distinct level pairs of every two factors while they could still be
    identical up to relabelling, and 64-bit hashes of the (policy, period) keys seen so far (8 bytes
    a row, the one part that grows with the book; repeats are confirmed exactly at the end)."""

    def __init__(self, spec: Spec) -> None:
        self.spec = spec
        self.totals = np.zeros(len(SUMS))
        self.has_amount = spec.columns.claim_amount is not None
        self.levels: dict[str, LevelSums] = {f.name: _no_sums(f) for f in spec.factors}
        self.spread: dict[str, tuple[float, float]] = {f.name: (np.inf, -np.inf) for f in spec.factors
                                                       if f.type == "numeric"}
        names = spec.factor_names
        # distinct (a, b) level pairs; None once some level of one meets two levels of the other
        self.pairs: dict[tuple[str, str], pd.DataFrame | None] = {
            (a, b): pd.DataFrame({"a": [], "b": []}) for i, a in enumerate(names) for b in names[i + 1:]}
        self.seen_keys: list[np.ndarray] = []
        self.repeat_hashes: list[np.ndarray] = []

    @classmethod
    def of_chunk(cls, spec: Spec, t: _Typed) -> "_Tally":
        """The tally of one typed chunk."""
        tally = cls(spec)
        weights = _row_weights(t.exposure, t.count, t.amount)
        tally.totals = weights.sum(axis=0)
        codes = {}
        for f in spec.factors:
            values = t.factors[f.name]
            uniq, inv = codes[f.name] = _sorted_codes(values)
            if f.type == "categorical":
                tally.levels[f.name] = LevelSums(uniq, _sums_by(inv, weights, len(uniq)))
            elif f.bands is not None:
                tally.levels[f.name].sums = _sums_by(assign_bands(values, f.bands), weights, len(f.bands) + 1)
            if f.type == "numeric":
                finite = uniq[np.isfinite(uniq)]
                if finite.size:
                    tally.spread[f.name] = (float(finite[0]), float(finite[-1]))
        for a, b in tally.pairs:
            tally.pairs[(a, b)] = _chunk_pairs(*codes[a], *codes[b])
        if t.policy is not None and t.period is not None:
            keys = pd.util.hash_pandas_object(pd.DataFrame({"p": t.policy, "t": t.period}), index=False).to_numpy()
            repeat = pd.Series(keys).duplicated(keep="first").to_numpy()
            tally.seen_keys = [np.unique(keys)]
            tally.repeat_hashes = [np.unique(keys[repeat])] if repeat.any() else []
        return tally

    def merge(self, later: "_Tally") -> None:
        """Add the tally of the rows that follow these in the book."""
        self.totals += later.totals
        for f in self.spec.factors:
            mine, theirs = self.levels[f.name], later.levels[f.name]
            if f.type == "categorical":
                self.levels[f.name] = mine.merged(theirs.values, theirs.sums)
            elif f.bands is not None:
                mine.sums += theirs.sums
            if f.type == "numeric":
                (low, high), (their_low, their_high) = self.spread[f.name], later.spread[f.name]
                self.spread[f.name] = (min(low, their_low), max(high, their_high))
        for key, pairs in self.pairs.items():
            theirs = later.pairs[key]
            self.pairs[key] = None if pairs is None or theirs is None else _one_to_one(
                pd.concat([pairs, theirs], ignore_index=True).drop_duplicates(ignore_index=True))
        for keys in later.seen_keys:
            for seen in self.seen_keys:
                hit = seen[np.minimum(np.searchsorted(seen, keys), len(seen) - 1)] == keys
                if hit.any():
                    self.repeat_hashes.append(keys[hit])
        self.seen_keys += later.seen_keys
        self.repeat_hashes += later.repeat_hashes

    def summary(self) -> BookSummary:
        return BookSummary(self.totals, self.has_amount, self.levels)


def _no_sums(f: Factor) -> LevelSums:
    """Empty sums for factor `f`: no values, or one zero row per band for a numeric factor with `bands`."""
    if f.type == "numeric" and f.bands is not None:
        return LevelSums(np.concatenate([[-np.inf], np.asarray(f.bands, dtype=float)]),
                         np.zeros((len(f.bands) + 1, len(SUMS))))
    return LevelSums(np.array([], dtype=float if f.type == "numeric" else object), np.zeros((0, len(SUMS))))


def _chunk_pairs(ua: np.ndarray, ka: np.ndarray, ub: np.ndarray, kb: np.ndarray) -> pd.DataFrame | None:
    """The distinct (a, b) value pairs of one chunk (from each factor's sorted values and codes) if
    they are one to one, else None. Factors with different numbers of values in a chunk cannot be
    one to one there, nor therefore in the book."""
    if len(ua) != len(ub):
        return None
    joint = ka.astype(np.int64) * len(ub) + kb
    cells = len(ua) * len(ub)
    pairs = np.flatnonzero(np.bincount(joint, minlength=cells)) if cells <= 4 * len(joint) else np.unique(joint)
    return _one_to_one(pd.DataFrame({"a": ua[pairs // len(ub)], "b": ub[pairs % len(ub)]}))


def _one_to_one(pairs: pd.DataFrame) -> pd.DataFrame | None:
    """The distinct pairs while each a meets one b and each b one a, else None (never identical)."""
    if pairs["a"].nunique() < len(pairs) or pairs["b"].nunique() < len(pairs):
        return None
    return pairs


def _repeated_keys(path: Path, spec: Spec, candidates: np.ndarray) -> np.ndarray:
    """Rows repeating an earlier (policy, period) pair, confirmed on the text of the rows whose
    key hash is among `candidates` (a second read of the two columns; hashes can collide)."""
    c = spec.columns
    rows, policy, period = [], [], []
    for off, chunk in iter_book(path, [c.policy_id, c.period]):
        p, t = _as_text(chunk[c.policy_id]), _as_text(chunk[c.period])
        keys = pd.util.hash_pandas_object(pd.DataFrame({"p": p, "t": t}), index=False).to_numpy()
        hit = np.flatnonzero(np.isin(keys, candidates))
        rows.append(hit + off)
        policy.append(p[hit])
        period.append(t[hit])
    frame = pd.DataFrame({"p": np.concatenate(policy), "t": np.concatenate(period)})
    return np.concatenate(rows)[frame.duplicated(keep="first").to_numpy()]


def _book_checks(tally: _Tally, path: Path, out: _Collector) -> None:
    spec, c = tally.spec, tally.spec.columns
    if tally.totals[2] == 0:
        out.note("error", c.claim_count, f"the book has no claims (column '{c.claim_count}' sums to 0)")
    if tally.repeat_hashes:
        rows = _repeated_keys(path, spec, np.concatenate(tally.repeat_hashes))
        out.add_rows("error", c.policy_id, f"repeating an earlier ('{c.policy_id}', '{c.period}') pair", rows)
    for f in spec.factors:
        lv = tally.levels[f.name]
        k = len(lv.values)
        if f.type == "numeric":
            low, high = tally.spread[f.name]
            single = format(low, "g") if low == high else None
        else:
            single = str(lv.values[0]) if k == 1 else None
        if single is not None:
            out.note("error", f.name, f"factor '{f.name}' has one level only ({single}); it cannot be rated")
        if f.type == "categorical":
            if k > MANY_LEVELS:
                out.note("warning", f.name, f"factor '{f.name}' has {k} levels (more than "
                                            f"{MANY_LEVELS}); consider grouping")
            total = lv.sums[:, 1].sum()
            if total > 0:
                share = lv.sums[:, 1] / total
                thin = [str(u) for u, s in zip(lv.values, share) if s < THIN_LEVEL_SHARE]
                if thin:
                    out.note("warning", f.name, f"factor '{f.name}': {len(thin)} thin level(s) under "
                                                f"{THIN_LEVEL_SHARE:.1%} of exposure: {', '.join(thin[:8])}")
    for (a, b), pairs in tally.pairs.items():  # still one to one: as many levels of a as of b as pairs
        if pairs is not None and len(pairs) >= 2:
            out.note("error", b, f"factors '{a}' and '{b}' are identical up to relabelling; keep one of them")


def _concat(parts: list[_Typed]) -> _Typed:
    """One `_Typed` from the chunks' parts, column by column, releasing each part's column once it is
    copied (so the book is held about once, not twice)."""
    def cat(holders: list, name: str):
        vals = [h[name] if isinstance(h, dict) else getattr(h, name) for h in holders]
        for h in holders:
            h.pop(name) if isinstance(h, dict) else setattr(h, name, None)
        return None if vals[0] is None else np.concatenate(vals)
    factors = {k: cat([p.factors for p in parts], k) for k in list(parts[0].factors)}
    return _Typed(*(cat(parts, name) for name in ("exposure", "count", "amount", "premium")), factors,
                  cat(parts, "policy"), cat(parts, "period"))


def parquet_slices(path: str | Path, chunk_rows: int = CHUNK_ROWS) -> list[tuple[str, list[int], int]]:
    """(file, row groups, first row) of each slice of about `chunk_rows` rows of a Parquet book (a
    file or a folder of parts), in book order; a slice never splits a row group."""
    import pyarrow.parquet as pq
    slices, offset = [], 0
    for part in _book_files(Path(path)):
        if part.suffix.lower() == ".csv":
            raise InputError(f"{part}: a CSV book is read in one process; convert it to Parquet to "
                             "validate it on a cluster")
        try:
            meta = pq.ParquetFile(part).metadata
        except Exception as e:  # pyarrow raises several types for damaged files
            raise InputError(f"{part}: not a readable Parquet file ({type(e).__name__}: {e})") from None
        groups, rows = [], 0
        for g in range(meta.num_row_groups):
            groups.append(g)
            rows += meta.row_group(g).num_rows
            if rows >= chunk_rows or g == meta.num_row_groups - 1:
                slices.append((str(part), groups, offset))
                offset, groups, rows = offset + rows, [], 0
    return slices


def _scan_slice(job: tuple[Spec, list[str]], piece: tuple[str, list[int], int]) -> tuple[_Collector, _Tally]:
    """Check one slice of a Parquet book (run here or on a Dask worker): its findings and tally."""
    import pyarrow.parquet as pq
    spec, needed = job
    file, groups, offset = piece
    try:
        chunk = pq.ParquetFile(file, pre_buffer=False).read_row_groups(groups, columns=needed).to_pandas()
    except Exception as e:
        raise InputError(f"{file}: not a readable Parquet file ({type(e).__name__}: {e})") from None
    out = _Collector(file)
    return out, _Tally.of_chunk(spec, check_chunk(chunk, offset, spec, out))


def scan_book(path: str | Path, spec: Spec, keep_rows: bool = True, chunk_rows: int = CHUNK_ROWS,
              runner: TaskRunner | None = None) -> tuple[_Typed | None, BookSummary, list[Finding]]:
    """Read the whole book chunk by chunk, typing it and collecting every finding.

    Returns (the typed book, or None with `keep_rows=False`; the summed summary; the findings).
    Without the rows, memory stays about one chunk plus the distinct levels and 8 bytes a row for
    the (policy, period) keys when a period column is named. With a `runner` (and no rows kept),
    the slices of a Parquet book are checked as its tasks and their tallies merged in book order.
    """
    p = Path(path)
    header = read_columns(p)
    needed = spec.columns.used() + spec.factor_names
    missing = [col for col in needed if col not in header]
    if missing:
        hint = ""
        if len(header) == 1 and any(sep in header[0] for sep in (";", "\t", "|")):
            hint = " (the header is one column: is the delimiter a comma?)"
        raise InputError(f"{p}: missing column{'s' if len(missing) > 1 else ''} "
                         f"{', '.join(repr(m) for m in missing)}{hint}")
    out = _Collector(str(p))
    tally = _Tally(spec)
    parts = []
    if runner is not None and not keep_rows:
        slices = parquet_slices(p, chunk_rows)
        with progress_bar(f"checking {len(slices)} slices of the book", len(slices)) as advance:
            for found, part_tally in runner.map(_scan_slice, (spec, needed), slices, advance):
                out.merge(found)
                tally.merge(part_tally)
    else:
        for off, chunk in iter_book(p, needed, chunk_rows):
            typed = check_chunk(chunk, off, spec, out)
            tally.merge(_Tally.of_chunk(spec, typed))
            if keep_rows:
                parts.append(typed)
    if tally.totals[0] == 0:
        raise InputError(f"{p}: the book has no rows")
    _book_checks(tally, p, out)
    return (_concat(parts) if keep_rows else None), tally.summary(), out.findings()


# --------------------------------------------------------------------------------------------
# the split

def holdout_flags(policy: np.ndarray, seed: int, holdout: float) -> np.ndarray:
    """True for held-out rows: u(seed, policy) < holdout, with u = SipHash-2-4(policy; key from seed)/2^64.

    The hash depends only on the policy id and the seed, so a policy's rows stay together and the split
    does not change with chunking or row order.
    """
    if holdout <= 0:
        return np.zeros(len(policy), dtype=bool)
    key = f"{seed:016d}"[-16:]
    h = pd.util.hash_array(np.asarray(policy, dtype=object), hash_key=key, categorize=True)
    u = h.astype(np.float64) / 2.0**64
    return u < holdout


def load_book(path: str | Path, spec: Spec) -> Book:
    """Read, check and type a book; the first error stops with `InputError` (exit 2)."""
    typed, _, findings = scan_book(path, spec)
    errors = [f for f in findings if f.level == "error"]
    if errors:
        raise InputError(errors[0].message)
    n = len(typed.exposure)
    policy = typed.policy if typed.policy is not None else np.arange(n).astype(str).astype(object)
    frame = pd.DataFrame({f.name: typed.factors[f.name] for f in spec.factors})
    return Book(path=str(path), frame=frame, exposure=typed.exposure, claim_count=typed.count,
                claim_amount=typed.amount, current_premium=typed.premium, policy=policy,
                holdout=holdout_flags(policy, spec.split.seed, spec.split.holdout),
                sha256=book_sha256(path), warnings=[f for f in findings if f.level == "warning"])


# --------------------------------------------------------------------------------------------
# banding and levels

@dataclass(frozen=True)
class Levels:
    """How one factor is cut for tables and GLMs: band edges (numeric) or the level order."""

    name: str
    labels: tuple[str, ...]
    base: str
    edges: tuple[float, ...] | None = None


def cut_levels(f: Factor, values: np.ndarray, exposure: np.ndarray, source: str) -> Levels:
    """Bands or level order of factor `f` from its `values` and their `exposure` (rows, or distinct
    values with summed exposure).

    Numeric: the spec's edges, else exposure-quantile edges (`n_bands`). Categorical: the spec's
    `levels` order, else levels sorted as strings. Base: the spec's `base`, else the largest exposure.
    """
    if f.type == "numeric":
        edges = np.asarray(f.bands) if f.bands is not None else quantile_edges(values, exposure, f.n_bands)
        cat = banded(values, edges)
        labels = tuple(cat.categories)
        codes = cat.codes
        edges_t = tuple(float(e) for e in edges)
    else:
        labels = f.levels if f.levels is not None else tuple(sorted(set(values)))
        codes = pd.Categorical(values, categories=labels).codes
        edges_t = None
    expo = np.bincount(codes, weights=exposure, minlength=len(labels))
    base = f.base if f.base is not None else labels[int(np.argmax(expo))]
    if f.base is not None and f.base not in labels:
        raise InputError(f"{source}: key 'factors.{f.name}.base': '{f.base}' is not one of its "
                         f"levels or bands ({', '.join(labels[:10])})")
    return Levels(f.name, labels, base, edges_t)


def factor_levels(book: Book, spec: Spec, train: np.ndarray) -> dict[str, Levels]:
    """Bands and level orders per factor (`cut_levels`), fixed on the training rows."""
    return {f.name: cut_levels(f, book.frame[f.name].to_numpy()[train], book.exposure[train], spec.source)
            for f in spec.factors}


def categorise(book_frame: pd.DataFrame, levels: dict[str, Levels]) -> pd.DataFrame:
    """Factor columns as ordered Categoricals of band or level labels."""
    cols = {}
    for name, lv in levels.items():
        values = book_frame[name].to_numpy()
        if lv.edges is not None:
            cols[name] = banded(values, lv.edges)
        else:
            cols[name] = pd.Categorical(values, categories=list(lv.labels), ordered=True)
    return pd.DataFrame(cols)


def with_quantile_bands(path: str | Path, spec: Spec, summary: BookSummary, chunk_rows: int = CHUNK_ROWS
                        ) -> tuple[Spec, BookSummary]:
    """Band the numeric factors that have no `bands`: their exposure-quantile edges over the whole
    book (`book_quantiles`: five reads of the factor and the exposure, memory independent of the
    distinct values), then their sums per band in one more read. Returns the spec with those
    edges as the factors' bands, and the summary with their sums."""
    unbanded = [f for f in spec.factors if f.type == "numeric" and f.bands is None]
    if not unbanded:
        return spec, summary
    c = spec.columns

    def values_and_exposure(name: str) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        for _, chunk in iter_book(path, [name, c.exposure], chunk_rows):
            yield _to_number(chunk[name])[0], _usable_exposure(_to_number(chunk[c.exposure])[0])
    banded_factors = {}
    for f in unbanded:
        edges = book_quantile_edges(partial(values_and_exposure, f.name), f.n_bands)
        banded_factors[f.name] = replace(f, bands=tuple(float(e) for e in edges))
    banded = replace(spec, factors=tuple(banded_factors.get(f.name, f) for f in spec.factors))
    levels = dict(summary.levels)
    sums = {name: _no_sums(f) for name, f in banded_factors.items()}
    columns = [c.exposure, c.claim_count] + ([c.claim_amount] if c.claim_amount else []) + list(banded_factors)
    for _, chunk in iter_book(path, columns, chunk_rows):
        amount = _to_number(chunk[c.claim_amount])[0] if c.claim_amount else None
        weights = _row_weights(_to_number(chunk[c.exposure])[0], _to_number(chunk[c.claim_count])[0], amount)
        for name, f in banded_factors.items():
            sums[name].sums += _sums_by(assign_bands(_to_number(chunk[name])[0], f.bands), weights,
                                        len(f.bands) + 1)
    levels.update(sums)
    return banded, replace(summary, levels=levels)


def profile(summary: BookSummary, spec: Spec) -> dict[str, pd.DataFrame]:
    """Exposure, claims, amount, frequency (claims/exposure), severity (amount/claims) and loss cost
    (amount/exposure) per level or band, and overall; bands and levels cut as `cut_levels` does on
    the whole book (every numeric factor banded: give the spec `with_quantile_bands` returns)."""
    out = {"(overall)": _profile_table(summary.totals[None, :], pd.Index(["all"]), summary.has_amount)}
    for f in spec.factors:
        lv = summary.levels[f.name]
        cut = cut_levels(f, lv.values, lv.sums[:, 1], spec.source)
        if cut.edges is not None:
            codes = banded(lv.values, cut.edges).codes
        else:
            codes = pd.Categorical(lv.values, categories=list(cut.labels)).codes
        sums = _sums_by(codes, lv.sums, len(cut.labels))
        index = pd.CategoricalIndex(cut.labels, categories=cut.labels, ordered=True, name=f.name)
        out[f.name] = _profile_table(sums, index, summary.has_amount)
    return out


def _profile_table(sums: np.ndarray, index: pd.Index, has_amount: bool) -> pd.DataFrame:
    """One profile table from summed (rows, exposure, claims, amount); groups with no rows are NaN."""
    empty = sums[:, 0] == 0
    g = pd.DataFrame({"exposure": np.where(empty, np.nan, sums[:, 1]),
                      "claims": np.where(empty, np.nan, sums[:, 2]),
                      "amount": np.where(empty | (not has_amount), np.nan, sums[:, 3])}, index=index)
    g["frequency"] = g["claims"] / g["exposure"]
    g["severity"] = g["amount"] / g["claims"]
    g["loss_cost"] = g["amount"] / g["exposure"]
    return g
