"""LightGBM's text model format read into trees, and the routing of values through a tree's nodes.

A model text holds a header (``feature_names=...``, ``num_tree_per_iteration=...``) and one
``Tree=i`` section per tree, with ``num_leaves`` and, per internal node 0 .. num_leaves-2, the arrays
``split_feature``, ``threshold``, ``decision_type``, ``left_child`` and ``right_child`` (a child < 0
is the leaf ~child), then ``leaf_value`` and, for categorical splits, ``cat_boundaries`` and
``cat_threshold``. Linear trees and multi-output models are refused.

Routing at a node (LightGBM's ``NumericalDecision`` and ``CategoricalDecision``):
- decision_type bit 0: categorical split; bit 1: missing values go left (the default way);
  bits 2-3: missing type 0 None, 1 Zero, 2 NaN;
- a numeric value goes left when value <= threshold, except: with missing type NaN a NaN goes the
  default way; with missing type None a NaN is read as 0; with missing type Zero a NaN and any
  |value| <= 1e-35 (float32, ``kZeroThreshold``) go the default way;
- a categorical split sends to the left the integer codes (values truncated to integers) whose bit
  is set in its ``cat_threshold`` words, and everything else (other codes, negative values, NaN)
  to the right.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from premiumlab._core.errors import InputError

ZERO_THRESHOLD = float(np.float32(1e-35))  # LightGBM's kZeroThreshold
MISSING_ZERO, MISSING_NAN = 1, 2  # decision_type bits 2-3 (0: no missing handling)
CATEGORY_WORD_BITS = 32


def is_categorical(decision_type: int | np.ndarray) -> bool | np.ndarray:
    """Whether a decision_type (or each of an array of them) is a categorical split (bit 0).

    Parameters
    ----------
    decision_type : int or np.ndarray of int
        A node's ``decision_type`` from the model text, or an array of them.

    Returns
    -------
    bool or np.ndarray of bool
        (decision_type & 1) != 0: a bool for an int, an array shaped like an array.
    """
    return (decision_type & 1) != 0


def missing_type(decision_type: int | np.ndarray) -> int | np.ndarray:
    """Missing type of a decision_type (bits 2-3): 0 None, MISSING_ZERO or MISSING_NAN.

    Parameters
    ----------
    decision_type : int or np.ndarray of int
        A node's ``decision_type`` from the model text, or an array of them.

    Returns
    -------
    int or np.ndarray of int
        (decision_type >> 2) & 3: an int for an int, an array shaped like an array.
    """
    return (decision_type >> 2) & 3


@dataclass(frozen=True)
class Tree:
    """One tree section of the LightGBM text format (internal nodes 0..n-2; child < 0 is leaf ~child)."""

    index: int
    split_feature: np.ndarray
    threshold: np.ndarray
    decision_type: np.ndarray
    left_child: np.ndarray
    right_child: np.ndarray
    leaf_value: np.ndarray
    cat_boundaries: np.ndarray
    cat_threshold: np.ndarray

    def left_code_mask(self, node: int) -> np.ndarray:
        """Boolean mask over integer codes 0 .. 32 x words - 1 of a categorical node: True for the
        codes sent left (bit ``code % 32`` of word ``code // 32`` of its ``cat_threshold`` slice)."""
        slot = int(self.threshold[node])
        words = self.cat_threshold[self.cat_boundaries[slot] : self.cat_boundaries[slot + 1]]
        return ((words[:, None] >> np.arange(CATEGORY_WORD_BITS)[None, :]) & 1).ravel().astype(bool)

    def left_codes(self, node: int) -> np.ndarray:
        """The integer codes a categorical node sends left, ascending."""
        return np.flatnonzero(self.left_code_mask(node))

    def goes_left(self, node: int, values: np.ndarray) -> np.ndarray:
        """Whether each of `values` goes to the left child at internal node `node` (module docstring).

        Parameters
        ----------
        node : int
            Internal node index, 0 .. num_leaves-2.
        values : np.ndarray
            Float values of the node's split feature (NaN allowed; categorical: integer codes).

        Returns
        -------
        np.ndarray
            Boolean array shaped like `values`.
        """
        decision = int(self.decision_type[node])
        if is_categorical(decision):
            listed = self.left_code_mask(node)
            known = np.isfinite(values) & (values >= 0) & (values < listed.size)
            return known & listed[np.where(known, values, 0).astype(np.int64)]
        missing = missing_type(decision)
        default_left = bool(decision & 2)
        threshold = float(self.threshold[node])
        if missing == MISSING_NAN:
            return np.where(np.isnan(values), default_left, values <= threshold)
        as_zero = np.where(np.isnan(values), 0.0, values)
        if missing == MISSING_ZERO:
            return np.where(np.abs(as_zero) <= ZERO_THRESHOLD, default_left, as_zero <= threshold)
        return as_zero <= threshold


def _key_values(section: str) -> dict[str, str]:
    pairs = {}
    for line in section.splitlines():
        key, sep, value = line.partition("=")
        if sep:
            pairs[key.strip()] = value.strip()
    return pairs


def _numbers(fields: dict[str, str], key: str, tree: int, dtype: type, required: bool = True) -> np.ndarray:
    if key not in fields:
        if required:
            raise InputError(f"model text: tree {tree} lacks {key!r}")
        return np.empty(0, dtype=dtype)
    try:
        return np.array(fields[key].split(), dtype=float).astype(dtype)
    except ValueError:
        raise InputError(f"model text: tree {tree} has a non-numeric {key!r}") from None


def parse_model(model_text: str) -> tuple[list[str], list[Tree]]:
    """Read a LightGBM text model.

    Parameters
    ----------
    model_text : str
        The model as ``Booster.model_to_string()`` writes it.

    Returns
    -------
    tuple[list[str], list[Tree]]
        The feature names (in the model's column order) and the trees in order.

    Raises
    ------
    InputError
        No feature names, several trees per iteration, a linear tree, a missing or non-numeric
        array, or arrays whose lengths disagree with ``num_leaves``.
    """
    body = model_text.split("\nend of trees", 1)[0]
    sections = body.split("\nTree=")
    header = _key_values(sections[0])
    if "feature_names" not in header:
        raise InputError("model text: no 'feature_names' line; is this a LightGBM text model?")
    if header.get("num_tree_per_iteration", "1") != "1":
        raise InputError("model text: several trees per iteration (multi-output); one output is needed")
    names = header["feature_names"].split()
    trees = []
    for section in sections[1:]:
        index = int(section.split("\n", 1)[0])
        fields = _key_values(section)
        if fields.get("is_linear", "0") != "0":
            raise InputError(f"model text: tree {index} is a linear tree; only constant leaves are supported")
        leaves = int(fields.get("num_leaves", "0"))
        internal = leaves - 1
        arrays = {
            key: _numbers(fields, key, index, dtype, required=internal > 0)
            for key, dtype in (
                ("split_feature", np.int64),
                ("threshold", np.float64),
                ("decision_type", np.int64),
                ("left_child", np.int64),
                ("right_child", np.int64),
            )
        }
        tree = Tree(
            index=index,
            leaf_value=_numbers(fields, "leaf_value", index, np.float64),
            cat_boundaries=_numbers(fields, "cat_boundaries", index, np.int64, required=False),
            cat_threshold=_numbers(fields, "cat_threshold", index, np.int64, required=False),
            **arrays,
        )
        if tree.leaf_value.size != leaves or any(a.size != internal for a in arrays.values()):
            raise InputError(f"model text: tree {index} has arrays that disagree with num_leaves={leaves}")
        trees.append(tree)
    return names, trees


@dataclass(frozen=True)
class Trees:
    """The trees of a LightGBM text model with its feature names."""

    trees: tuple[Tree, ...]
    feature_names: tuple[str, ...]

    @classmethod
    def from_text(cls, model_text: str) -> Trees:
        """The parsed model (see `parse_model`)."""
        names, trees = parse_model(model_text)
        return cls(tuple(trees), tuple(names))

    def splitting_on(self, feature: int) -> list[Tree]:
        """The trees with at least one split on feature index `feature`."""
        return [t for t in self.trees if t.split_feature.size and (t.split_feature == feature).any()]
