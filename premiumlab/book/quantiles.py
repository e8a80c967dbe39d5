"""Exposure-quantile band edges of a numeric factor over a whole book, in memory that does not grow
with the number of distinct values: the same edges as `bands.quantile_edges`, found in five passes.

Each value is mapped to a 64-bit key that sorts as the values do. Passes 1 to 4 each settle 16 more
bits of the key of u_j, the smallest distinct value whose cumulative weight share W(<= u_j) reaches
k / n_bands (within `bands.SHARE_TOLERANCE`, as there): every pass sums the weights of the rows under the bits settled so far in 65,536 bins of
the next 16 bits (one histogram per distinct prefix, so at most n_bands - 1 of them). Pass 5 finds
the next distinct value above each u_j, which is the edge. `chunks()` must give the same
(values, weights) chunks at every call: the book's values and exposures, read again each pass.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable

import numpy as np

from premiumlab.book.bands import SHARE_TOLERANCE

BITS = 16
BINS = 1 << BITS
LEVELS = 64 // BITS
_SIGN = np.uint64(1 << 63)


def _sortable_keys(values: np.ndarray) -> np.ndarray:
    """uint64 keys ordered as the float64 values (-0.0 counts as 0.0; NaN must be absent)."""
    bits = (np.asarray(values, dtype=np.float64) + 0.0).view(np.uint64)
    return np.where(bits & _SIGN, ~bits, bits | _SIGN)


def _from_key(key: int) -> float:
    bits = np.uint64(key)
    return float((bits ^ _SIGN if bits & _SIGN else ~bits).view(np.float64))


Chunks = Callable[[], Iterable[tuple[np.ndarray, np.ndarray]]]


def _histograms(chunks: Chunks, prefixes: set[int], level: int) -> dict[int, np.ndarray]:
    """Weight per value of the key bits [64 - 16 (level + 1), 64 - 16 level) of the rows whose
    higher bits equal each prefix."""
    shift = np.uint64(64 - BITS * (level + 1))
    out = {p: np.zeros(BINS) for p in prefixes}
    for values, weights in chunks():
        keys = _sortable_keys(values)
        weights = np.asarray(weights, dtype=float)
        digit = ((keys >> shift) & np.uint64(BINS - 1)).astype(np.intp)
        high = keys >> np.uint64(64 - BITS * level) if level else None
        for p in prefixes:
            rows = slice(None) if high is None else high == np.uint64(p)
            out[p] += np.bincount(digit[rows], weights=weights[rows], minlength=BINS)
    return out


def book_quantile_edges(chunks: Chunks, n_bands: int) -> np.ndarray:
    """`bands.quantile_edges` of all the chunks' values and weights, in five passes (module doc).

    Parameters
    ----------
    chunks : callable
        Called once per pass, with no argument; gives (values, weights) array pairs, the same at
        every call: a numeric factor's values (without NaN) and their exposure (exposure units,
        >= 0).
    n_bands : int
        Bands wanted (>= 1), as for `bands.quantile_edges`.

    Returns
    -------
    ndarray of float
        The interior edges `bands.quantile_edges` gives on all the values and weights at once.

    Raises
    ------
    ValueError
        When the weights sum to zero.
    """
    targets = np.arange(1, n_bands) / n_bands
    prefix = [0] * len(targets)  # the settled high bits of each target's key
    below = [0.0] * len(targets)  # the weight of the keys below that prefix
    total = None
    for level in range(LEVELS):
        hists = _histograms(chunks, set(prefix), level)
        if total is None:
            total = float(hists[0].sum())
            if not total > 0:
                raise ValueError("book_quantile_edges: the weights sum to zero")
        for k, q in enumerate(targets):
            h = hists[prefix[k]]
            share = (below[k] + np.cumsum(h)) / total
            digit = int(np.searchsorted(share, q - SHARE_TOLERANCE, side="left"))
            digit = min(digit, int(np.flatnonzero(h)[-1]))  # rounding cannot push past the last value
            below[k] += float(h[:digit].sum())
            prefix[k] = (prefix[k] << BITS) | digit
    return _edges_above(chunks, sorted(set(prefix)))


def _edges_above(chunks: Chunks, keys: list[int]) -> np.ndarray:
    """Pass 5: for each key the next distinct value above it (or its own value when it is the
    largest); edges above the smallest value, as `quantile_edges` keeps them."""
    wanted = np.array(keys, dtype=np.uint64)
    nxt = np.full(len(keys), np.iinfo(np.uint64).max, dtype=np.uint64)
    found = np.zeros(len(keys), dtype=bool)
    lowest = None
    for values, _ in chunks():
        chunk_keys = np.sort(_sortable_keys(values))
        if chunk_keys.size == 0:
            continue
        lowest = chunk_keys[0] if lowest is None else min(lowest, chunk_keys[0])
        pos = np.searchsorted(chunk_keys, wanted, side="right")
        here = pos < chunk_keys.size
        candidate = chunk_keys[np.minimum(pos, chunk_keys.size - 1)]
        better = here & (candidate < nxt)
        nxt[better] = candidate[better]
        found |= here
    assert lowest is not None  # the weights sum to more than zero (pass 1), so some chunk has values
    edges = np.unique([_from_key(int(n if f else w)) for n, f, w in zip(nxt, found, wanted)])
    return edges[edges > _from_key(int(lowest))]
