"""The seeded holdout split of a book's policies."""

from __future__ import annotations

import numpy as np
import pandas as pd


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
    key = f"{seed:016d}"[-16:]
    h = pd.util.hash_array(np.asarray(policy, dtype=object), hash_key=key, categorize=True)
    u = h.astype(np.float64) / 2.0**64
    return u < holdout
