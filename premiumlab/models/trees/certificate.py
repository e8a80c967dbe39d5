"""Monotonicity certificate of a LightGBM text model, read from the text alone, and an empirical sweep.

The certificate (exact and structural). A tree maps every point to one leaf; each leaf's region is
a product over features of the sets of values that reach it. Two leaves A, B of one tree can be met
by two policies that differ only in the promised feature x exactly when their regions overlap on
every other feature; if some value of x in A lies below some value of x in B, an increasing
promise needs value(A) <= value(B). When every such pair in every tree passes, each tree, and so
their sum (the raw score), is monotone in x for every possible policy. This holds whatever
LightGBM constraint method built the trees.

Sets of values are represented exactly: in each tree the thresholds on a feature cut the real line
into cells (-inf, t1], (t1, t2], ..., (tk, inf), and each node sends a whole cell one way; NaN is
its own cell. Routing is LightGBM's, as `premiumlab.models.trees.parser` states it; with missing
type Zero, +-1e-35 are added as cell edges. Codes of a categorical split form one cell each (the
codes named in the tree) plus one cell for all the rest.
The promised feature must be numeric (an ordered factor passed as integer codes); a categorical
split on it is refused. NaN of the promised feature is not ordered and takes no part in the check.
Linear trees and multi-output models are refused.

The sweep (empirical): for held-out policies, set the factor to each point of an ascending grid and
count steps where the raw score moves against the promise by more than 1e-12.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Protocol, TypedDict

import numpy as np
import pandas as pd

from premiumlab._core.defaults import SEED
from premiumlab._core.errors import InputError
from premiumlab.models.trees.parser import MISSING_ZERO, ZERO_THRESHOLD, Tree, is_categorical, missing_type, parse_model

LISTED_VIOLATIONS = 50  # violations listed in full; all are counted
#: The certificate compares every pair of leaves of a tree (leaves x leaves matrices, one of int64):
#: a tree with more leaves is refused rather than exhausting memory (4096^2 x 8 bytes = 128 MiB).
MAX_CERTIFIED_LEAVES = 4096
SWEEP_TOLERANCE = 1e-12


class Violation(TypedDict):
    tree: int
    leaves: list[int]  # [lower leaf, upper leaf] on the promised feature
    values: list[float]  # their leaf values
    amount: float  # how far the pair moves against the promise (raw score units)


class Certificate(TypedDict):
    feature: str
    feature_index: int
    direction: int
    monotone: bool
    trees_checked: int
    trees_splitting_on_feature: int
    leaf_pairs_checked: int  # pairs of leaves of one tree overlapping on every other feature and
    # ordered on this one: the pairs whose values must be ordered
    violation_count: int
    max_violation: float
    trees_with_violations: list[int]
    violations: list[Violation]  # the largest LISTED_VIOLATIONS, by amount


class SweepResult(TypedDict):
    feature: str
    direction: int
    policies: int
    grid: list[float]
    steps_checked: int
    violation_count: int
    policies_with_violation: int
    max_violation: float
    tolerance: float


class RawScorer(Protocol):
    def predict_raw(self, features: pd.DataFrame) -> np.ndarray: ...


# ---------------------------------------------------------------------------------------------
# cells and leaf regions


def _numeric_cells(thresholds: np.ndarray, zero_type: bool) -> np.ndarray:
    """One representative per cell: each edge (closed right end of its cell), then +inf, then NaN."""
    edges = [thresholds]
    if zero_type:
        edges.append(np.array([np.nextafter(-ZERO_THRESHOLD, -np.inf), ZERO_THRESHOLD]))
    return np.concatenate([np.unique(np.concatenate(edges)), [np.inf, np.nan]])


def _cells_and_routes(tree: Tree) -> tuple[dict[int, np.ndarray], dict[int, np.ndarray]]:
    """Per split feature: cell representatives; per internal node: which cells of its feature go left."""
    categorical = np.asarray(is_categorical(tree.decision_type))
    cells: dict[int, np.ndarray] = {}
    for feature in np.unique(tree.split_feature):
        on_feature = tree.split_feature == feature
        if categorical[on_feature].any():
            codes = np.unique(np.concatenate([tree.left_codes(int(n)) for n in np.flatnonzero(on_feature)]))
            cells[int(feature)] = np.concatenate([codes, [-1]]).astype(np.float64)  # -1: every other value
        else:
            zero_type = bool(np.any(missing_type(tree.decision_type[on_feature]) == MISSING_ZERO))
            cells[int(feature)] = _numeric_cells(tree.threshold[on_feature], zero_type)
    routes = {node: tree.goes_left(node, cells[int(feature)]) for node, feature in enumerate(tree.split_feature)}
    return cells, routes


def _leaf_regions(tree: Tree) -> tuple[dict[int, np.ndarray], dict[int, np.ndarray]]:
    """(cells per feature, feature -> boolean matrix leaves x cells: which cells reach each leaf)."""
    cells, routes = _cells_and_routes(tree)
    leaves = tree.leaf_value.size
    regions = {f: np.ones((leaves, c.size), dtype=bool) for f, c in cells.items()}
    if leaves == 1:
        return cells, regions
    stack: list[tuple[int, dict[int, np.ndarray]]] = [(0, {})]
    while stack:
        node, path = stack.pop()
        feature = int(tree.split_feature[node])
        current = path.get(feature, np.ones(cells[feature].size, dtype=bool))
        for child, side in ((tree.left_child[node], routes[node]), (tree.right_child[node], ~routes[node])):
            child_path = {**path, feature: current & side}
            if child < 0:
                for f, mask in child_path.items():
                    regions[f][~child] = mask
            else:
                stack.append((int(child), child_path))
    return cells, regions


# ---------------------------------------------------------------------------------------------
# certificate


def _resolve_feature(names: list[str], feature: str | int) -> int:
    if isinstance(feature, (int, np.integer)) and not isinstance(feature, bool):
        if not 0 <= feature < len(names):
            raise InputError(f"feature: index {feature} is outside 0..{len(names) - 1}")
        return int(feature)
    if feature not in names:
        raise InputError(f"feature: {feature!r} is not in the model (features: {', '.join(names)})")
    return names.index(feature)


def _check_direction(direction: int) -> None:
    if direction not in (1, -1):
        raise InputError(f"direction: {direction!r}; use +1 (increasing) or -1 (decreasing)")


def _tree_pairs(tree: Tree, feature: int, direction: int) -> tuple[int, list[Violation]]:
    """(comparable leaf pairs, violations) of one tree for the promised feature."""
    _cells, regions = _leaf_regions(tree)
    if feature not in regions:
        return 0, []
    if np.any(is_categorical(tree.decision_type[tree.split_feature == feature])):
        raise InputError(
            f"model text: tree {tree.index} splits the promised feature as a categorical; "
            "a promise needs a numeric (integer-coded) feature"
        )
    leaves = tree.leaf_value.size
    overlap = np.ones((leaves, leaves), dtype=bool)
    for f, region in regions.items():
        if f != feature:
            as_int = region.astype(np.int64)
            overlap &= (as_int @ as_int.T) > 0
    ordered_cells = regions[feature][:, :-1]  # the last cell is NaN: not ordered
    count = ordered_cells.shape[1]
    has_value = ordered_cells.any(axis=1)
    lowest = np.where(has_value, ordered_cells.argmax(axis=1), count)
    highest = np.where(has_value, count - 1 - ordered_cells[:, ::-1].argmax(axis=1), -1)
    below = overlap & (lowest[:, None] < highest[None, :])  # some x of row leaf below some x of column leaf
    comparable = int(np.triu(below | below.T, k=1).sum())
    values = tree.leaf_value
    against = direction * (values[:, None] - values[None, :])
    lower, upper = np.nonzero(below & (against > 0))
    violations = [
        Violation(
            tree=tree.index,
            leaves=[int(a), int(b)],
            values=[float(values[a]), float(values[b])],
            amount=float(against[a, b]),
        )
        for a, b in zip(lower, upper)
    ]
    return comparable, violations


def certify(model_text: str, feature: str | int, direction: int) -> Certificate:
    """Check every tree of a LightGBM text model for monotonicity in `feature` (+1 increasing,
    -1 decreasing); exact for every input, from the text alone (see the module docstring).

    A comparable pair of leaves (A, B) of one tree, with some value of the feature in A below some
    value in B and the two regions overlapping on every other feature, violates the promise when
    direction x (value(A) - value(B)) > 0; that amount is the violation (raw score units).

    Parameters
    ----------
    model_text : str
        The model as ``Booster.model_to_string()`` writes it.
    feature : str or int
        The promised feature, by name or by index in the model's features; numeric (an ordered
        factor as integer codes).
    direction : int
        +1 (increasing) or -1 (decreasing).

    Returns
    -------
    Certificate
        `monotone` (no violation), the trees and leaf pairs checked, the violation count, the
        largest violation, the trees with violations, and the LISTED_VIOLATIONS largest in full.

    Raises
    ------
    InputError
        A direction other than +-1, an unknown feature, a model the parser refuses, a tree of
        more than MAX_CERTIFIED_LEAVES leaves, or a categorical split on the promised feature.
    """
    _check_direction(direction)
    names, trees = parse_model(model_text)
    index = _resolve_feature(names, feature)
    for tree in trees:
        if tree.leaf_value.size > MAX_CERTIFIED_LEAVES:
            raise InputError(
                f"model text: tree {tree.index} has {tree.leaf_value.size} leaves; the certificate "
                f"compares every pair of leaves and takes trees of at most {MAX_CERTIFIED_LEAVES}"
            )
    pairs, violations, splitting = 0, [], 0
    for tree in trees:
        tree_pairs, tree_violations = _tree_pairs(tree, index, direction)
        splitting += bool((tree.split_feature == index).any())
        pairs += tree_pairs
        violations.extend(tree_violations)
    violations.sort(key=lambda v: -v["amount"])
    return Certificate(
        feature=names[index],
        feature_index=index,
        direction=direction,
        monotone=not violations,
        trees_checked=len(trees),
        trees_splitting_on_feature=splitting,
        leaf_pairs_checked=pairs,
        violation_count=len(violations),
        max_violation=violations[0]["amount"] if violations else 0.0,
        trees_with_violations=sorted({v["tree"] for v in violations}),
        violations=violations[:LISTED_VIOLATIONS],
    )


# ---------------------------------------------------------------------------------------------
# sweep


def _default_grid(values: pd.Series, points: int = 50) -> np.ndarray:
    """Distinct observed values at `points` evenly spaced quantiles."""
    finite = values.to_numpy(dtype=np.float64, na_value=np.nan)
    finite = finite[np.isfinite(finite)]
    if finite.size == 0:
        raise InputError(f"sweep: column {values.name!r} has no finite values to build a grid from")
    return np.unique(np.quantile(finite, np.linspace(0.0, 1.0, points), method="inverted_cdf"))


def sweep(
    model: RawScorer | Callable[[pd.DataFrame], np.ndarray],
    features_sample: pd.DataFrame,
    feature: str,
    direction: int,
    grid: np.ndarray | None = None,
    policies: int = 1000,
    seed: int = SEED,
) -> SweepResult:
    """Set `feature` to every grid value (ascending; default: the observed values at 50 quantiles
    of the sample) for up to
    `policies` seeded rows of `features_sample` and count grid steps where the raw score moves
    against `direction` by more than 1e-12 (one predict call on the stacked rows). `model` has a
    `predict_raw(features)` method (a `GbmModel`) or is itself such a function.

    A step from grid point g_k to g_(k+1) for one policy is a violation when
    -direction x (score(g_(k+1)) - score(g_k)) > 1e-12 (SWEEP_TOLERANCE).

    Parameters
    ----------
    model : RawScorer or callable
        Gives the raw score (log of the prediction) of a features frame.
    features_sample : pd.DataFrame
        Policies in the model's feature encoding (as `GbmModel.predict_raw` reads them).
    feature : str
        The promised feature, a column of `features_sample`.
    direction : int
        +1 (increasing) or -1 (decreasing).
    grid : np.ndarray or None
        At least two strictly increasing values of the feature; None: the sample's values at 50
        evenly spaced quantiles.
    policies : int
        Largest number of rows of `features_sample` drawn (without replacement).
    seed : int
        Seed of that draw.

    Returns
    -------
    SweepResult
        The grid, the policies and steps checked, the violating steps, the policies with one, the
        largest step against the promise (raw score units, 0 if none) and the tolerance.

    Raises
    ------
    InputError
        A direction other than +-1, `feature` not a column, no rows, or a bad grid.
    """
    _check_direction(direction)
    if feature not in features_sample.columns:
        raise InputError(f"sweep: features_sample has no column {feature!r}")
    rows = len(features_sample)
    if rows == 0:
        raise InputError("sweep: features_sample has no rows")
    take = np.sort(np.random.default_rng(seed).choice(rows, min(policies, rows), replace=False))
    sample = features_sample.iloc[take].reset_index(drop=True)
    points = _default_grid(sample[feature]) if grid is None else np.asarray(grid, dtype=np.float64)
    if points.ndim != 1 or points.size < 2 or not (np.diff(points) > 0).all():
        raise InputError("sweep: grid must hold at least two strictly increasing values")
    stacked = sample.iloc[np.repeat(np.arange(len(sample)), points.size)].reset_index(drop=True)
    stacked[feature] = np.tile(points, len(sample))
    predict_raw = model.predict_raw if hasattr(model, "predict_raw") else model
    scores = np.asarray(predict_raw(stacked), dtype=np.float64).reshape(len(sample), points.size)
    against = -direction * np.diff(scores, axis=1)
    bad = against > SWEEP_TOLERANCE
    return SweepResult(
        feature=feature,
        direction=direction,
        policies=len(sample),
        grid=points.tolist(),
        steps_checked=int(bad.size),
        violation_count=int(bad.sum()),
        policies_with_violation=int(bad.any(axis=1).sum()),
        max_violation=float(max(against.max(), 0.0)),
        tolerance=SWEEP_TOLERANCE,
    )
