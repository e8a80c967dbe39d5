"""One pass over a book: per-chunk tallies merged in book order, the book-level checks and the profile.

`scan_book` reads a book chunk by chunk (or, given a task runner, its Parquet slices on Dask
workers), types and checks every chunk (`rows.check_chunk`), and sums what the book-level checks
need into a tally: no repeated (policy, period) pair, claims somewhere, no one-level factor, no two
factors identical up to relabelling, thin and very many levels. `load_book` keeps the typed rows
for `fit` (compact ones when asked: categorical factors as integer codes, policy ids as 64-bit
keys); `validate` keeps only the tally, so its memory does not grow with the book.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, replace
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab._core.cluster import TaskRunner
from premiumlab._core.errors import InputError
from premiumlab._core.memory import returning_freed_memory
from premiumlab._core.progress import progress_bar
from premiumlab.book.bands import assign_bands
from premiumlab.book.levels import cut_levels
from premiumlab.book.quantiles import book_quantile_edges
from premiumlab.book.reading import CHUNK_ROWS, book_parts, book_sha256, iter_book, read_columns, unreadable_parquet
from premiumlab.book.rows import Book, Finding, FindingCollector, TypedChunk, as_text, check_chunk, to_number
from premiumlab.book.spec import Factor, Spec
from premiumlab.book.split import held_out, holdout_flags, policy_keys
from rating_tables import MISSING_LABEL

#: A level or band holding less than this share of the exposure is reported as thin.
THIN_LEVEL_SHARE = 0.005
#: A categorical factor with more levels than this is reported as having very many levels.
MANY_LEVELS = 100


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

    def merged(self, values: np.ndarray, sums: np.ndarray) -> LevelSums:
        """These sums plus those of more distinct `values` (which may repeat ours)."""
        uniq, inv = _sorted_codes(np.concatenate([self.values, values]))
        return LevelSums(uniq, _sums_by(inv, np.concatenate([self.sums, sums]), len(uniq)))


def _sums_by(codes: np.ndarray, weights: np.ndarray, k: int) -> np.ndarray:
    """Column sums of `weights` (rows x columns) per code 0..k-1: shape (k, columns)."""
    return np.column_stack([np.bincount(codes, weights=weights[:, j], minlength=k) for j in range(weights.shape[1])])


@dataclass
class BookSummary:
    """What the book-level checks and the profile need, summed chunk by chunk."""

    totals: np.ndarray  # the SUMS over the whole book
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
        self.levels: dict[str, LevelSums] = {f.name: _no_sums(f) for f in spec.factors}
        self.spread: dict[str, tuple[float, float]] = {
            f.name: (np.inf, -np.inf) for f in spec.factors if f.type == "numeric"
        }
        names = spec.factor_names
        # distinct (a, b) level pairs; None once some level of one meets two levels of the other
        self.pairs: dict[tuple[str, str], pd.DataFrame | None] = {
            (a, b): pd.DataFrame({"a": [], "b": []}) for i, a in enumerate(names) for b in names[i + 1 :]
        }
        self.seen_keys: list[np.ndarray] = []
        self.repeat_hashes: list[np.ndarray] = []

    @classmethod
    def of_chunk(cls, spec: Spec, t: TypedChunk) -> _Tally:
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
                tally.levels[f.name].sums = _band_sums(values, f.bands, weights)
            if f.type == "numeric":
                finite = uniq[np.isfinite(uniq)]
                if finite.size:
                    tally.spread[f.name] = (float(finite[0]), float(finite[-1]))
        for a, b in tally.pairs:
            tally.pairs[(a, b)] = _chunk_pairs(*codes[a], *codes[b])
        if t.policy is not None and t.period is not None:
            keys = _key_hashes(t.policy, t.period)
            repeat = pd.Series(keys).duplicated(keep="first").to_numpy()
            tally.seen_keys = [np.unique(keys)]
            tally.repeat_hashes = [np.unique(keys[repeat])] if repeat.any() else []
        return tally

    def merge(self, later: _Tally) -> None:
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
            their_pairs = later.pairs[key]
            self.pairs[key] = (
                None
                if pairs is None or their_pairs is None
                else _one_to_one(pd.concat([pairs, their_pairs], ignore_index=True).drop_duplicates(ignore_index=True))
            )
        for keys in later.seen_keys:
            for seen in self.seen_keys:
                hit = seen[np.minimum(np.searchsorted(seen, keys), len(seen) - 1)] == keys
                if hit.any():
                    self.repeat_hashes.append(keys[hit])
        self.seen_keys += later.seen_keys
        self.repeat_hashes += later.repeat_hashes

    def summary(self) -> BookSummary:
        return BookSummary(self.totals, self.levels)


def _key_hashes(policy: np.ndarray, period: np.ndarray) -> np.ndarray:
    """A 64-bit hash of each row's (policy, period) text pair (uint64)."""
    return pd.util.hash_pandas_object(pd.DataFrame({"p": policy, "t": period}), index=False).to_numpy()


def _no_sums(f: Factor) -> LevelSums:
    """Empty sums for factor `f`: no values, or for a numeric factor with `bands` one zero row per band
    (keyed by its lower edge) and one for the missing values (keyed by NaN)."""
    if f.type == "numeric" and f.bands is not None:
        return LevelSums(
            np.concatenate([[-np.inf], np.asarray(f.bands, dtype=float), [np.nan]]),
            np.zeros((len(f.bands) + 2, len(SUMS))),
        )
    return LevelSums(np.array([], dtype=float if f.type == "numeric" else object), np.zeros((0, len(SUMS))))


def _band_sums(values: np.ndarray, edges: tuple[float, ...], weights: np.ndarray) -> np.ndarray:
    """The SUMS per band of numeric `values` (`assign_bands`), then of the missing (NaN) values."""
    missing = np.isnan(values)
    codes = np.where(missing, len(edges) + 1, assign_bands(np.where(missing, 0.0, values), edges))
    return _sums_by(codes, weights, len(edges) + 2)


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
    assert c.policy_id is not None and c.period is not None  # keys are hashed only when both are named
    rows, policy, period = [], [], []
    for off, chunk in iter_book(path, [c.policy_id, c.period]):
        p, t = as_text(chunk[c.policy_id]), as_text(chunk[c.period])
        keys = _key_hashes(p, t)
        hit = np.flatnonzero(np.isin(keys, candidates))
        rows.append(hit + off)
        policy.append(p[hit])
        period.append(t[hit])
    frame = pd.DataFrame({"p": np.concatenate(policy), "t": np.concatenate(period)})
    return np.concatenate(rows)[frame.duplicated(keep="first").to_numpy()]


def _book_checks(tally: _Tally, path: Path, out: FindingCollector) -> None:
    spec, c = tally.spec, tally.spec.columns
    if tally.totals[2] == 0:
        out.note("error", c.claim_count, f"the book has no claims (column '{c.claim_count}' sums to 0)")
    if tally.repeat_hashes and c.policy_id is not None:  # keys are hashed only with a policy and a period
        rows = _repeated_keys(path, spec, np.concatenate(tally.repeat_hashes))
        out.add_rows("error", c.policy_id, f"repeating an earlier ('{c.policy_id}', '{c.period}') pair", rows)
    for f in spec.factors:
        lv = tally.levels[f.name]
        k = len(lv.values)
        if f.type == "numeric":
            low, high = tally.spread[f.name]
            single = format(low, "g") if low == high else None
            if low > high:
                out.note("error", f.name, f"factor '{f.name}': every value is missing; it cannot be rated")
        else:
            single = _shown(lv.values[0]) if k == 1 else None
        if single is not None:
            out.note("error", f.name, f"factor '{f.name}' has one level only ({single}); it cannot be rated")
        if f.type == "categorical":
            if k > MANY_LEVELS:
                out.note(
                    "warning", f.name, f"factor '{f.name}' has {k} levels (more than {MANY_LEVELS}); consider grouping"
                )
            total = lv.sums[:, 1].sum()
            if total > 0:
                share = lv.sums[:, 1] / total
                thin = [_shown(u) for u, s in zip(lv.values, share) if s < THIN_LEVEL_SHARE]
                if thin:
                    out.note(
                        "warning",
                        f.name,
                        f"factor '{f.name}': {len(thin)} thin level(s) under "
                        f"{THIN_LEVEL_SHARE:.1%} of exposure: {', '.join(thin[:8])}",
                    )
    for (a, b), pairs in tally.pairs.items():  # still one to one: as many levels of a as of b as pairs
        if pairs is not None and len(pairs) >= 2:
            out.note("error", b, f"factors '{a}' and '{b}' are identical up to relabelling; keep one of them")


def _shown(level: str) -> str:
    """A categorical level as messages name it: the missing label for a missing value ("")."""
    return MISSING_LABEL if level == "" else str(level)


def _concat(parts: list[TypedChunk]) -> TypedChunk:
    """One `TypedChunk` from the chunks' parts, column by column, releasing each part's column once it is
    copied (so the book is held about once, not twice)."""

    def cat(holders: list, name: str):
        vals = [h[name] if isinstance(h, dict) else getattr(h, name) for h in holders]
        for h in holders:
            h.pop(name) if isinstance(h, dict) else setattr(h, name, None)
        return None if vals[0] is None else np.concatenate(vals)

    factors = {k: cat([p.factors for p in parts], k) for k in list(parts[0].factors)}
    return TypedChunk(
        exposure=cat(parts, "exposure"),
        count=cat(parts, "count"),
        amount=cat(parts, "amount"),
        premium=cat(parts, "premium"),
        factors=factors,
        policy=cat(parts, "policy"),
        period=cat(parts, "period"),
    )


def _compact(t: TypedChunk, offset: int, spec: Spec, dictionaries: dict[str, dict[str, int]]) -> TypedChunk:
    """A typed chunk made compact: each categorical factor as int32 codes into its level list in
    `dictionaries` (grown in order of first appearance, shared by every chunk), the policy ids (the
    row numbers as text when the spec names no policy column) as their uint64 keys (`policy_keys`),
    no period and no current premium (4 or 8 bytes a row per column instead of a pointer to text)."""
    factors = dict(t.factors)
    for f in spec.factors:
        if f.type == "categorical":
            codes, uniques = pd.factorize(t.factors[f.name], use_na_sentinel=False)
            known = dictionaries[f.name]
            chunk_to_book = np.array([known.setdefault(u, len(known)) for u in uniques], dtype=np.int32)
            factors[f.name] = chunk_to_book[codes]
    n = len(t.exposure)
    policy = t.policy if t.policy is not None else np.arange(offset, offset + n).astype(str).astype(object)
    return replace(t, factors=factors, policy=policy_keys(policy, spec.split.seed), period=None, premium=None)


def parquet_slices(path: str | Path, chunk_rows: int = CHUNK_ROWS) -> list[tuple[str, list[int], int]]:
    """(file, row groups, first row) of each slice of about `chunk_rows` rows of a Parquet book (a
    file or a folder of parts), in book order; a slice never splits a row group.

    Parameters
    ----------
    path : str or Path
        A Parquet book: a file or a folder of parts (`book_parts`).
    chunk_rows : int
        Rows a slice reaches before it is closed (CHUNK_ROWS by default); a slice ends at the
        first row group that takes it to `chunk_rows` rows or more, or at the end of its file.

    Returns
    -------
    list of tuple of (str, list of int, int)
        Per slice: the file, its row-group indices, and the 0-based book row of its first row.

    Raises
    ------
    InputError
        For a CSV book (a cluster reads Parquet only) or an unreadable Parquet file.
    """
    import pyarrow.parquet as pq

    slices, offset = [], 0
    kind, parts = book_parts(Path(path))
    if kind == "csv":
        raise InputError(
            f"{path}: a CSV book is read in one process; convert it to Parquet to validate it on a cluster"
        )
    for part in parts:
        read_columns(part)  # a part with a repeated or nested column is refused here, as in iter_book
        try:
            meta = pq.ParquetFile(part).metadata
        except Exception as e:  # pyarrow raises several types for damaged files
            raise unreadable_parquet(part, e) from None
        groups, rows = [], 0
        for g in range(meta.num_row_groups):
            groups.append(g)
            rows += meta.row_group(g).num_rows
            if rows >= chunk_rows or g == meta.num_row_groups - 1:
                slices.append((str(part), groups, offset))
                offset, groups, rows = offset + rows, [], 0
    return slices


def _scan_slice(job: tuple[Spec, list[str]], piece: tuple[str, list[int], int]) -> tuple[FindingCollector, _Tally]:
    """Check one slice of a Parquet book (run here or on a Dask worker): its findings and tally."""
    import pyarrow.parquet as pq

    spec, needed = job
    file, groups, offset = piece
    try:
        chunk = pq.ParquetFile(file, pre_buffer=False).read_row_groups(groups, columns=needed).to_pandas()
    except Exception as e:
        raise unreadable_parquet(file, e) from None
    out = FindingCollector(file)
    return out, _Tally.of_chunk(spec, check_chunk(chunk, offset, spec, out))


def scan_book(
    path: str | Path,
    spec: Spec,
    keep_rows: bool = True,
    chunk_rows: int = CHUNK_ROWS,
    runner: TaskRunner | None = None,
    dictionaries: dict[str, dict[str, int]] | None = None,
) -> tuple[TypedChunk | None, BookSummary, list[Finding]]:
    """Read the whole book chunk by chunk, typing it and collecting every finding.

    Returns (the typed book, or None with `keep_rows=False`; the summed summary; the findings).
    Without the rows, memory stays about one chunk plus the distinct levels and 8 bytes a row for
    the (policy, period) keys when a period column is named. With a `runner` (and no rows kept),
    the slices of a Parquet book are checked as its tasks and their tallies merged in book order.

    Parameters
    ----------
    path : str or Path
        A book file or a folder of book parts.
    spec : Spec
        The pricing spec: the columns and factors to read and check.
    keep_rows : bool
        Keep the typed rows (True, for `load_book`) or only the sums (False, for `validate`).
    chunk_rows : int
        Most rows read at once (CHUNK_ROWS by default), or the slice size on a cluster.
    runner : TaskRunner or None
        Where to check the slices of a Parquet book when `keep_rows` is False; None reads the
        book here, chunk by chunk.
    dictionaries : dict of str to dict of str to int, or None
        With the rows kept: None keeps them as typed; a dict, filled here with each categorical
        factor's levels in order of first appearance (level -> code), keeps them compact (`_compact`:
        categorical factors as codes into those levels, policy ids as their keys, no period and no
        current premium).

    Returns
    -------
    tuple of (TypedChunk or None, BookSummary, list of Finding)
        The typed book (None with `keep_rows=False`); the rows, exposure, claims and amount summed
        over the book and per level or band; every finding, errors and warnings, in book order.

    Raises
    ------
    InputError
        When a column the spec names is missing, the book has no rows or cannot be read.
    """
    p = Path(path)
    header = read_columns(p)
    needed = spec.columns.used() + spec.factor_names
    missing = [col for col in needed if col not in header]
    if missing:
        hint = ""
        if len(header) == 1 and any(sep in header[0] for sep in (";", "\t", "|")):
            hint = " (the header is one column: is the delimiter a comma?)"
        raise InputError(
            f"{p}: missing column{'s' if len(missing) > 1 else ''} {', '.join(repr(m) for m in missing)}{hint}"
        )
    out = FindingCollector(str(p))
    tally = _Tally(spec)
    parts = []
    if dictionaries is not None:
        dictionaries.update({f.name: {} for f in spec.factors if f.type == "categorical"})
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
                parts.append(typed if dictionaries is None else _compact(typed, off, spec, dictionaries))
    if tally.totals[0] == 0:
        raise InputError(f"{p}: the book has no rows")
    _book_checks(tally, p, out)
    return (_concat(parts) if keep_rows else None), tally.summary(), out.findings()


def load_book(path: str | Path, spec: Spec, compact: bool = False) -> Book:
    """Read, check and type a book; the first error stops with `InputError` (exit 2).

    Parameters
    ----------
    path : str or Path
        A book file or a folder of book parts.
    spec : Spec
        The pricing spec: columns, factors and the holdout split.
    compact : bool
        False: factors as typed (categorical ones as text) and policy ids as text. True, for the
        GLM-only `fit` without experience adjustments: categorical factors as pandas Categoricals
        (their levels in order of first appearance, integer codes), policy ids as their uint64 keys
        (`split.policy_keys`, hashed once), and no current premium; the holdout flags are the same.

    Returns
    -------
    Book
        The typed rows, each row's policy id (its 0-based row number as text when the spec names
        no policy column), the holdout flags (`holdout_flags`, by `split.seed` and
        `split.holdout`), the book's sha256 and its warnings.

    Raises
    ------
    InputError
        With the message of the first error finding, or when the book cannot be read.
    """
    dictionaries: dict[str, dict[str, int]] | None = None
    if compact:
        dictionaries = {}
        with returning_freed_memory():  # else the holes between the chunks' kept arrays grow with the book
            typed, _, findings = scan_book(path, spec, dictionaries=dictionaries)
    else:
        typed, _, findings = scan_book(path, spec)
    errors = [f for f in findings if f.level == "error"]
    if errors:
        raise InputError(errors[0].message)
    assert typed is not None  # scan_book keeps the rows by default
    n = len(typed.exposure)
    if dictionaries is not None:
        assert typed.policy is not None  # _compact keys every row
        policy, holdout = typed.policy, held_out(typed.policy, spec.split.holdout)
        for name, known in dictionaries.items():
            typed.factors[name] = pd.Categorical.from_codes(typed.factors[name], categories=list(known))
    else:
        policy = typed.policy if typed.policy is not None else np.arange(n).astype(str).astype(object)
        holdout = holdout_flags(policy, spec.split.seed, spec.split.holdout)
    frame = pd.DataFrame({f.name: typed.factors.pop(f.name) for f in spec.factors}, copy=False)  # no second copy
    return Book(
        path=str(path),
        frame=frame,
        exposure=typed.exposure,
        claim_count=typed.count,
        claim_amount=typed.amount,
        current_premium=typed.premium,
        policy=policy,
        holdout=holdout,
        sha256=book_sha256(path),
        warnings=[f for f in findings if f.level == "warning"],
    )


def with_quantile_bands(
    path: str | Path, spec: Spec, summary: BookSummary, chunk_rows: int = CHUNK_ROWS
) -> tuple[Spec, BookSummary]:
    """Band the numeric factors that have no `bands`: their exposure-quantile edges over the whole
    book (`book_quantiles`: five reads of the factor and the exposure, memory independent of the
    distinct values), then their sums per band in one more read. Returns the spec with those
    edges as the factors' bands, and the summary with their sums.

    Parameters
    ----------
    path : str or Path
        The book the summary was made from.
    spec : Spec
        The pricing spec.
    summary : BookSummary
        The sums of a scan of the book (`scan_book`).
    chunk_rows : int
        Most rows read at once (CHUNK_ROWS by default).

    Returns
    -------
    tuple of (Spec, BookSummary)
        The spec with every numeric factor banded and the summary with sums per band for the
        factors banded here; both unchanged when every numeric factor has `bands`.
    """
    unbanded = [f for f in spec.factors if f.type == "numeric" and f.bands is None]
    if not unbanded:
        return spec, summary
    c = spec.columns

    def values_and_exposure(name: str) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        for _, chunk in iter_book(path, [name, c.exposure], chunk_rows):
            values, exposure = to_number(chunk[name])[0], _usable_exposure(to_number(chunk[c.exposure])[0])
            present = ~np.isnan(values)
            yield values[present], exposure[present]

    edges: dict[str, tuple[float, ...]] = {}
    banded_factors = {}
    for f in unbanded:
        edges[f.name] = tuple(float(e) for e in book_quantile_edges(partial(values_and_exposure, f.name), f.n_bands))
        banded_factors[f.name] = replace(f, bands=edges[f.name])
    banded = replace(spec, factors=tuple(banded_factors.get(f.name, f) for f in spec.factors))
    levels = dict(summary.levels)
    sums = {name: _no_sums(f) for name, f in banded_factors.items()}
    columns = [c.exposure, c.claim_count] + ([c.claim_amount] if c.claim_amount else []) + list(banded_factors)
    for _, chunk in iter_book(path, columns, chunk_rows):
        amount = to_number(chunk[c.claim_amount])[0] if c.claim_amount else None
        weights = _row_weights(to_number(chunk[c.exposure])[0], to_number(chunk[c.claim_count])[0], amount)
        for name, factor_edges in edges.items():
            sums[name].sums += _band_sums(to_number(chunk[name])[0], factor_edges, weights)
    levels.update(sums)
    return banded, replace(summary, levels=levels)


def profile(summary: BookSummary, spec: Spec) -> dict[str, pd.DataFrame]:
    """Exposure, claims, amount, frequency (claims/exposure), severity (amount/claims) and loss cost
    (amount/exposure) per level or band, and overall; bands and levels cut as `cut_levels` does on
    the whole book (every numeric factor banded: give the spec `with_quantile_bands` returns).

    Parameters
    ----------
    summary : BookSummary
        The book's sums per level or band (`scan_book`, then `with_quantile_bands`).
    spec : Spec
        The pricing spec with every numeric factor banded.

    Returns
    -------
    dict of str to pandas.DataFrame
        "(overall)" (one row, "all") and one table per factor indexed by its levels or bands in
        order, with columns exposure (exposure units), claims, amount (money; NaN without a claim
        amount column), frequency, severity and loss_cost; a level or band without rows is NaN.

    Raises
    ------
    InputError
        When the spec's `base` of a factor is not one of its levels or bands (`cut_levels`).
    """
    has_amount = spec.columns.claim_amount is not None
    out = {"(overall)": _profile_table(summary.totals[None, :], pd.Index(["all"]), has_amount)}
    for f in spec.factors:
        lv = summary.levels[f.name]
        seen = lv.sums[:, 0] > 0
        cut = cut_levels(f, lv.values[seen], lv.sums[seen, 1], spec.source)
        sums = _sums_by(cut.codes(lv.values[seen]), lv.sums[seen], len(cut.labels))
        index = pd.CategoricalIndex(cut.labels, categories=cut.labels, ordered=True, name=f.name)
        out[f.name] = _profile_table(sums, index, has_amount)
    return out


def _profile_table(sums: np.ndarray, index: pd.Index, has_amount: bool) -> pd.DataFrame:
    """One profile table from summed (rows, exposure, claims, amount); groups with no rows are NaN."""
    empty = sums[:, 0] == 0
    g = pd.DataFrame(
        {
            "exposure": np.where(empty, np.nan, sums[:, 1]),
            "claims": np.where(empty, np.nan, sums[:, 2]),
            "amount": np.where(empty | (not has_amount), np.nan, sums[:, 3]),
        },
        index=index,
    )
    g["frequency"] = g["claims"] / g["exposure"]
    g["severity"] = g["amount"] / g["claims"]
    g["loss_cost"] = g["amount"] / g["exposure"]
    return g
