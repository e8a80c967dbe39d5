"""Exact partial dependence of a tree model's raw score on one feature, from the trees themselves.

A sample row walks each tree that splits on the feature, taking both branches at the splits on
that feature, so every leaf it can reach adds leaf value / sample size to the grid points that
those splits send there (routing as `premiumlab.models.trees.parser` states it). Trees that never
split on the feature add the same amount at every grid point and are skipped, so the curve is
known up to an additive constant.
"""

from __future__ import annotations

import numpy as np

from premiumlab.models.trees.parser import Tree, Trees


def _walk(
    tree: Tree,
    node: int,
    rows: np.ndarray,
    on_grid: np.ndarray,
    columns: list[np.ndarray],
    feature: int,
    grid: np.ndarray,
    out: np.ndarray,
) -> None:
    """Send `rows` of the sample down from `node` (child < 0 is leaf ~child); at splits on `feature`
    they go both ways, each way narrowing `on_grid` to the grid points the split sends there."""
    if node < 0:
        out[on_grid] += tree.leaf_value[~node] * rows.size
        return
    split = int(tree.split_feature[node])
    left_child, right_child = int(tree.left_child[node]), int(tree.right_child[node])
    if split == feature:
        left = tree.goes_left(node, grid)
        for child, mask in ((left_child, on_grid & left), (right_child, on_grid & ~left)):
            if mask.any():
                _walk(tree, child, rows, mask, columns, feature, grid, out)
        return
    left = tree.goes_left(node, columns[split][rows])
    for child, part in ((left_child, rows[left]), (right_child, rows[~left])):
        if part.size:
            _walk(tree, child, part, on_grid, columns, feature, grid, out)


def partial_dependence(trees: Trees, sample: np.ndarray, feature: int, grid: np.ndarray) -> np.ndarray:
    """Mean raw score over the sample with `feature` set to each grid value, up to a constant.

    Parameters
    ----------
    trees : Trees
        The parsed model.
    sample : np.ndarray
        Encoded sample matrix, rows x features in the model's feature order.
    feature : int
        Index of the feature in the model.
    grid : np.ndarray
        Values of the feature (categorical: the model's integer codes).

    Returns
    -------
    np.ndarray
        PD(g) = (1 / n) sum_i sum_trees leaf value reached by row i with the feature at g, over the
        trees that split on `feature` only (the others add a constant), one value per grid point.
    """
    grid = np.asarray(grid, dtype=float)
    columns = [np.ascontiguousarray(sample[:, j]) for j in range(sample.shape[1])]
    rows = np.arange(sample.shape[0])
    everywhere = np.ones(grid.size, dtype=bool)
    out = np.zeros(grid.size)
    for tree in trees.splitting_on(feature):
        _walk(tree, 0, rows, everywhere, columns, feature, grid, out)
    return out / sample.shape[0]
