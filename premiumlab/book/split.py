"""The seeded holdout split of a book's policies, and the policy keys it is drawn from."""

from __future__ import annotations

import numpy as np
import pandas as pd


def policy_keys(policy: np.ndarray, seed: int) -> np.ndarray:
    """The 64-bit key of each row's policy id: SipHash-2-4 of its text, keyed by the split's seed.

    The key depends only on the policy id and the seed, so it is the same however the book is
    chunked; a compact book keeps it in place of the text (8 bytes a row). Two ids share a key
    with probability about m^2 / 2^65 among m policies (under 1e-6 for 5 million).

    Parameters
    ----------
    policy : ndarray
        The policy id of each row (as text).
    seed : int
        The split's seed (`split.seed`); written as 16 decimal digits (zero-padded, the last 16
        of a longer one), it is the hash key.

    Returns
    -------
    ndarray of uint64
        The key of each row.
    """
    key = f"{seed:016d}"[-16:]
    return pd.util.hash_array(np.asarray(policy, dtype=object), hash_key=key, categorize=True)


def held_out(keys: np.ndarray, holdout: float) -> np.ndarray:
    """True for held-out rows: u < holdout, with u = key / 2^64 (`policy_keys`).

    Parameters
    ----------
    keys : ndarray of uint64
        The policy key of each row (`policy_keys`).
    holdout : float
        Share of policies held out, in [0, 1); 0 or less holds none out.

    Returns
    -------
    ndarray of bool
        True for the rows of held-out policies.
    """
    if holdout <= 0:
        return np.zeros(len(keys), dtype=bool)
    return keys.astype(np.float64) / 2.0**64 < holdout


def holdout_flags(policy: np.ndarray, seed: int, holdout: float) -> np.ndarray:
    """True for held-out rows: u(seed, policy) < holdout, with u = SipHash-2-4(policy; key from seed)/2^64.

    The hash depends only on the policy id and the seed, so a policy's rows stay together and the split
    does not change with chunking or row order.

    Parameters
    ----------
    policy : ndarray
        The policy id of each row (as text).
    seed : int
        The split's seed (`split.seed`); written as 16 decimal digits (zero-padded, the last 16
        of a longer one), it is the hash key.
    holdout : float
        Share of policies held out, in [0, 1); 0 or less holds none out.

    Returns
    -------
    ndarray of bool
        True for the rows of held-out policies.
    """
    if holdout <= 0:
        return np.zeros(len(policy), dtype=bool)
    return held_out(policy_keys(policy, seed), holdout)
