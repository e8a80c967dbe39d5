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

import re
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


#: LightGBM's own bound on `num_leaves` (its documentation: 1 < num_leaves <= 131072).
MAX_LEAVES = 131_072
#: The largest decision_type: bits 0 (categorical), 1 (default left) and 2-3 (missing type).
MAX_DECISION_TYPE = 15
#: The largest code of a categorical split a `cat_threshold` word may hold (32 bits, unsigned).
MAX_CATEGORY_WORD = 2**32 - 1


def _numbers(fields: dict[str, str], key: str, tree: int, dtype: type, required: bool = True) -> np.ndarray:
    """The array `key` of a tree section: numbers, finite (thresholds may be infinite) and, for an
    integer array, whole numbers within int64."""
    if key not in fields:
        if required:
            raise InputError(f"model text: tree {tree} lacks {key!r}")
        return np.empty(0, dtype=dtype)
    try:
        values = np.array(fields[key].split(), dtype=float)
    except ValueError:
        raise InputError(f"model text: tree {tree} has a non-numeric {key!r}") from None
    if np.isnan(values).any() or (key != "threshold" and not np.isfinite(values).all()):
        raise InputError(f"model text: tree {tree} has a missing or infinite value in {key!r}")
    if dtype is np.int64 and not ((values == np.round(values)) & (np.abs(values) < 2.0**62)).all():
        raise InputError(f"model text: tree {tree} has a value in {key!r} that is not a whole number")
    return values.astype(dtype)


def _integer(fields: dict[str, str], key: str, where: str, default: str | None = None) -> int:
    text = fields.get(key, default)
    if text is None:
        raise InputError(f"model text: {where} lacks {key!r}")
    if not text.isdigit() or len(text) > 9:
        raise InputError(f"model text: {where} has {key}={text[:40]!r}; a whole number below 10^9 is needed")
    return int(text)


#: The other arrays of a tree section LightGBM reads, by the count they must have: one per internal
#: node, one per leaf (checked when present; premiumlab itself does not use them).
INTERNAL_EXTRAS = ("split_gain", "internal_value", "internal_weight", "internal_count")
LEAF_EXTRAS = ("leaf_weight", "leaf_count")


def _check_header(header: dict[str, str], names: list[str], model_text: str) -> None:
    """Refuse a header LightGBM would read past its arrays with (`max_feature_idx` other than the
    last feature) or a parameters section without its end line (a truncated file)."""
    if "max_feature_idx" in header and header["max_feature_idx"] != str(len(names) - 1):
        raise InputError(f"model text: max_feature_idx={header['max_feature_idx'][:40]} but {len(names)} feature names")
    if "\nparameters:" in model_text and "\nend of parameters" not in model_text:
        raise InputError("model text: no 'end of parameters' line; the file is truncated")


def _check_tree_sizes(header: dict[str, str], model_text: str) -> None:
    """Refuse `tree_sizes` that are not the byte lengths of the tree sections: LightGBM cuts the
    text by them and reads past a section otherwise."""
    if "tree_sizes" not in header:
        return
    data = model_text.encode("utf-8")
    starts = [m.start() for m in re.finditer(rb"(?m)^Tree=", data)]
    ends = [*starts[1:], data.find(b"\nend of trees") + 1]
    if header["tree_sizes"].split() != [str(b - a) for a, b in zip(starts, ends)]:
        raise InputError("model text: tree_sizes do not match the tree sections (an edited or truncated file)")


def _check_structure(tree: Tree, features: int) -> None:
    """Refuse a tree LightGBM would not have written: a split feature outside the model's
    features or split both as a categorical and as a number, an unknown decision type, children outside the tree, a node reached twice or never
    (a cycle or a second parent), or a categorical split whose slot or words are out of range."""
    internal = tree.split_feature.size
    where = f"model text: tree {tree.index}"
    if internal and not ((tree.split_feature >= 0) & (tree.split_feature < features)).all():
        raise InputError(f"{where} splits on a feature outside 0..{features - 1}")
    if internal and not ((tree.decision_type >= 0) & (tree.decision_type <= MAX_DECISION_TYPE)).all():
        raise InputError(f"{where} has a decision_type outside 0..{MAX_DECISION_TYPE}")
    leaves = tree.leaf_value.size
    for name, children in (("left_child", tree.left_child), ("right_child", tree.right_child)):
        if internal and not ((children >= -leaves) & (children < internal)).all():
            raise InputError(f"{where} has a {name} outside the tree (-{leaves}..{internal - 1})")
    if internal:
        seen_nodes = np.zeros(internal, dtype=bool)
        seen_leaves = np.zeros(leaves, dtype=bool)
        stack = [0]
        seen_nodes[0] = True
        while stack:
            node = stack.pop()
            for child in (int(tree.left_child[node]), int(tree.right_child[node])):
                seen = seen_leaves if child < 0 else seen_nodes
                at = ~child if child < 0 else child
                if seen[at]:
                    raise InputError(f"{where}: node {node} leads back to a node already reached (a cycle)")
                seen[at] = True
                if child >= 0:
                    stack.append(child)
        if not (seen_nodes.all() and seen_leaves.all()):
            raise InputError(f"{where}: some nodes or leaves are not reached from the root")
    categorical = np.flatnonzero(np.asarray(is_categorical(tree.decision_type)))
    mixed = np.intersect1d(tree.split_feature[categorical], np.delete(tree.split_feature, categorical))
    if mixed.size:
        raise InputError(f"{where} splits feature {mixed[0]} both as a categorical and as a number")
    if categorical.size:
        bounds = tree.cat_boundaries
        if (
            bounds.size < 2
            or bounds[0] != 0
            or (np.diff(bounds) < 0).any()
            or bounds[-1] != tree.cat_threshold.size
            or ((tree.cat_threshold < 0) | (tree.cat_threshold > MAX_CATEGORY_WORD)).any()
        ):
            raise InputError(f"{where} has cat_boundaries or cat_threshold out of range")
        slots = tree.threshold[categorical]
        if not ((slots == np.round(slots)) & (slots >= 0) & (slots < bounds.size - 1)).all():
            raise InputError(f"{where} has a categorical threshold outside 0..{bounds.size - 2}")


def parse_model(model_text: str) -> tuple[list[str], list[Tree]]:
    """Read a LightGBM text model, checking every field LightGBM itself would trip over.

    Each tree's `num_leaves` is at most LightGBM's MAX_LEAVES and at most half the length of the
    text (every leaf needs its value and a separator), so what a file declares cannot claim more
    memory than its size allows; every array is numeric, of the length `num_leaves` gives, whole
    where LightGBM stores integers, and finite (thresholds may be infinite); the tree is checked as
    a tree (`_check_structure`). A text without LightGBM's `end of trees` line (a truncated file)
    is refused.

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
        No feature names, several trees per iteration, a linear tree, a truncated text, a missing,
        non-numeric or out-of-range field, arrays whose lengths disagree with ``num_leaves``, or a
        structure that is not a tree.
    """
    body, end, _ = model_text.partition("\nend of trees")
    sections = body.split("\nTree=")
    header = _key_values(sections[0])
    if "feature_names" not in header:
        raise InputError("model text: no 'feature_names' line; is this a LightGBM text model?")
    if header.get("num_tree_per_iteration", "1") != "1":
        raise InputError("model text: several trees per iteration (multi-output); one output is needed")
    if not end:
        raise InputError("model text: no 'end of trees' line; the file is truncated")
    names = header["feature_names"].split()
    _check_header(header, names, model_text)
    most_leaves = min(MAX_LEAVES, len(model_text) // 2 + 1)
    trees = []
    for section in sections[1:]:
        first = section.split("\n", 1)[0].strip()
        index = _integer({"Tree": first}, "Tree", "a tree section")
        fields = _key_values(section)
        if fields.get("is_linear", "0") != "0":
            raise InputError(f"model text: tree {index} is a linear tree; only constant leaves are supported")
        leaves = _integer(fields, "num_leaves", f"tree {index}", default="0")
        if not 1 <= leaves <= most_leaves:
            raise InputError(f"model text: tree {index} has num_leaves={leaves}; 1..{most_leaves} for this file")
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
        sizes = {key: internal for key in (*arrays, *INTERNAL_EXTRAS)} | {"leaf_value": leaves}
        sizes |= {key: leaves for key in LEAF_EXTRAS}
        extras = {
            key: _numbers(fields, key, index, np.float64, required=False) for key in (*INTERNAL_EXTRAS, *LEAF_EXTRAS)
        }
        found = {**arrays, **extras, "leaf_value": tree.leaf_value}
        if any(key in fields and found[key].size != size for key, size in sizes.items()):
            raise InputError(f"model text: tree {index} has arrays that disagree with num_leaves={leaves}")
        categories = _integer(fields, "num_cat", f"tree {index}", default="0")
        if categories and tree.cat_boundaries.size != categories + 1:
            raise InputError(
                f"model text: tree {index} has num_cat={categories} but {tree.cat_boundaries.size} cat_boundaries"
            )
        _check_structure(tree, len(names))
        trees.append(tree)
    _check_tree_sizes(header, model_text)
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
