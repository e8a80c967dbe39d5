"""The seeded holdout split of a book's policies."""

from __future__ import annotations

import numpy as np
import pandas as pd


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
