"""Two-factor interactions of a boosted model: Friedman's H statistic on its raw (log) score, a
bootstrap interval for it, and a reference for noise from refits on books without interactions.

The statistic. For a sample x_1..x_n (the points, and the background the partial dependence
averages over) and a factor set S, the partial dependence at a point is
    PD_S(x_i) = (1/n) sum_b F(x_i,S, x_b,-S),
F the model's raw score (log of the prediction), x_i,S the point's values of S and x_b,-S the
background row's other values; every PD is centred to mean zero over the sample. For a pair (j, k)
    r_i = PD_jk(x_i) - PD_j(x_i) - PD_k(x_i)                                   (the pure interaction)
    H^2_jk = sum_i r_i^2 / sum_i PD_jk(x_i)^2                                  (unitless, usually in [0, 1])
    strength_jk = sqrt((1/n) sum_i r_i^2)                                      (raw-score units)
    share_jk = sum_i r_i^2 / sum_i (F(x_i) - mean F)^2
(H^2 as in Friedman and Popescu, 2008, Predictive learning via rule ensembles, Ann. Appl. Stat.,
section 8.1, eq. 44; recalled from memory). H^2 is the pair's interaction relative to the pair's own
effect, so a pair of weak factors with a small joint effect can reach H^2 near 1; `strength` is the
root mean square of the pure interaction on the log score (0.05: the pair moves premiums by about 5 %
beyond what its two factors do alone) and `share` its part of the variance of the log score. Pairs are ranked by strength.

Exact computation from the trees. The PDs are computed from the trees, not by predicting n^2 rows:
for a tree and a set S, the points fall into a few groups by the way they go at the tree's splits on
S; each group's PD is the mean leaf value over background rows routed with the group's way at
S-splits and their own way elsewhere. A tree that does not split on both j and k adds the same
amount to PD_jk as to PD_j + PD_k (up to a constant), so only trees splitting on both enter r.

The interval. A bootstrap of the sample (points and background together: multinomial weights, the
PD and the means weighted by them) gives `replicates` values of each figure; the interval is their
5th to 95th percentile. It measures how much the figure depends on which policies were sampled,
for this model.

The reference for noise. A boosted model fits interactions to noise, more between factors with
many levels or many split points (a 300-level territory against anything), so a pair's H on its
own says nothing about whether the book interacts. Computing H on pairs that a model was forbidden
to combine (LightGBM's interaction_constraints), or on pairs that share no tree, is no reference:
by the property above their r is exactly 0. Nor is permuting one factor inside the partial
dependence, which breaks its main effect as well. The reference used here is the statistic of the
booster refitted, with the same setting and rounds, to simulated books that have the book's main
effects and kind of noise but not the interaction (after Friedman and Popescu's null distribution
of H, section 8.3, recalled from memory, there with permuted residuals of an additive model):
1. a surrogate: the same setting with every factor alone in its trees (interaction_constraints),
   trained on 80 % of the policies and stopped by its deviance on the others, mean m_i;
2. `refits` null books (`null_books`): Poisson claim counts with mean m_i, and for a pure premium
   claim sizes drawn from the book's own, relative to their expected size, so large losses stay;
3. the booster refitted to each, and every pair's strength computed on the same sample.
The test is on log strength (floored at `NEGLIGIBLE_STRENGTH`, so an interaction under 1 % is never
a finding): under the null, log strength = the pair's own mean + an error common to all pairs in
scale, estimated from the refits (pooled standard deviation s over pairs, P (R - 1) degrees of
freedom for P pairs and R refits). A pair's
    t = (log strength - mean of its null log strengths) / (s sqrt(1 + 1/R)),
its p-value is Student's upper tail at t, and it stands out from noise when p < level / P
(Bonferroni over the pairs tested) and its strength is at least NOISE_MARGIN times its own largest
strength in the refits (`noise_test`). A real interaction changes the noise the booster fits around its factors, so
the test runs in rounds: a pair found is kept in the next round's surrogate (interaction_constraints
allow it) and the other pairs are tested again (`rank_interactions`). The refits keep the chosen
setting rather than repeating the search; the reference is therefore for this setting.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass, replace
from itertools import combinations
from typing import TYPE_CHECKING

import lightgbm as lgb
import numpy as np
from scipy import stats
from threadpoolctl import threadpool_limits

from premiumlab._core.cautions import DRAFT
from premiumlab._core.errors import InputError
from premiumlab.models.targets import TARGETS
from premiumlab.models.trees.parser import Tree, Trees

if TYPE_CHECKING:
    from premiumlab.models.gbm.fit import GbmModel
    from premiumlab.models.gbm.training import TrainingData

#: Policies in the sample the statistic is computed on (points and background).
DEFAULT_SAMPLE = 2000
#: Factors (the top ones by total split gain) whose pairs are measured.
DEFAULT_FACTORS = 6
#: Bootstrap replicates of the sample behind each interval.
DEFAULT_REPLICATES = 100
#: Books without interaction the booster is refitted to for the reference.
DEFAULT_REFITS = 5
#: Most rounds of the test (each keeps one more interaction in the books without interaction).
DEFAULT_ROUNDS = 3
#: A pair stands out only with a strength at least this multiple of its largest strength in the refits.
NOISE_MARGIN = 2.0
#: Family-wise level of the test over the pairs of a round (Bonferroni).
DEFAULT_LEVEL = 0.05
#: Interaction strength (raw-score units) below which a pair is negligible for a rating table: a
#: root mean square effect under 1 % of the premium. Strengths are floored here before the test.
NEGLIGIBLE_STRENGTH = 0.01
INTERVAL_PERCENTILES = (5.0, 95.0)
#: The surrogate of the null books: share of the policies it is trained on, most rounds, and rounds
#: without improvement on the other policies before it stops.
SURROGATE_TRAIN = 0.8
SURROGATE_MAX_ROUNDS = 2000
SURROGATE_PATIENCE = 50


def top_factors_by_gain(booster: lgb.Booster, count: int = DEFAULT_FACTORS) -> list[str]:
    """The `count` features with the largest total split gain (ties in feature order), gain > 0 only.

    Parameters
    ----------
    booster : lgb.Booster
        The fitted LightGBM booster.
    count : int
        Most features to return.

    Returns
    -------
    list[str]
        Feature names, largest total gain first; fewer than `count` when fewer have a gain above 0.
    """
    gains = booster.feature_importance(importance_type="gain")
    names = booster.feature_name()
    order = np.argsort(-gains, kind="stable")
    return [names[i] for i in order[:count] if gains[i] > 0]


# ---------------------------------------------------------------------------------------------
# exact partial dependence from the trees


def _decisions(tree: Tree, sample: np.ndarray) -> np.ndarray:
    """float32, internal nodes x rows: 1 where the sample row goes left at the node, else 0."""
    return np.stack([tree.goes_left(m, sample[:, int(f)]) for m, f in enumerate(tree.split_feature)]).astype(np.float32)


def _leaf_paths(tree: Tree) -> np.ndarray:
    """float32, leaves x internal nodes: +1 where the leaf's path goes left at the node, -1 where it
    goes right, 0 off its path."""
    paths = np.zeros((tree.leaf_value.size, tree.split_feature.size), dtype=np.float32)
    stack: list[tuple[int, list[tuple[int, float]]]] = [(0, [])]
    while stack:
        node, path = stack.pop()
        for child, way in ((int(tree.left_child[node]), 1.0), (int(tree.right_child[node]), -1.0)):
            steps = [*path, (node, way)]
            if child >= 0:
                stack.append((child, steps))
            else:
                for m, w in steps:
                    paths[~child, m] = w
    return paths


def _reach(paths: np.ndarray, decisions: np.ndarray) -> np.ndarray:
    """float32, leaves x rows: 1 where the row's way at every node of `paths` (a column subset)
    agrees with the leaf's path there. With sign s and left indicator d, the leaf's path is met when
    sum_m s_m d_m equals the number of its left turns (small integers, exact in float32)."""
    return (paths @ decisions == (paths > 0).sum(axis=1, dtype=np.float32)[:, None]).astype(np.float32)


def _group_rows(decisions: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rows grouped by their ways at the given nodes: (first row of each group, group of each row)."""
    _, first, member = np.unique(decisions.T.astype(bool), axis=0, return_index=True, return_inverse=True)
    return first, member.ravel()


def _tree_pd(
    tree: Tree, paths: np.ndarray, decisions: np.ndarray, in_set: np.ndarray, weights: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """One tree's partial dependence on the factors split at the nodes `in_set`, per column of
    bootstrap weights, uncentred and not yet divided by the weight total. Sample points that go the
    same way at those nodes form a group and share a value: the sum over leaves of leaf value x (the
    group's path is met at the nodes in the set) x (weight of the background rows whose path is met
    at the other nodes). Returns (groups x columns values, group of each sample row)."""
    first, member = _group_rows(decisions[in_set])
    at_points = _reach(paths[:, in_set], decisions[in_set][:, first])
    background = _reach(paths[:, ~in_set], decisions[~in_set]) @ weights  # integer counts: exact in float32
    return at_points.T.astype(np.float64) @ (tree.leaf_value[:, None] * background), member


@dataclass(frozen=True)
class _Cells:
    """Sample rows grouped by their values of a factor or a pair (a point's partial dependence on
    them depends on those values alone): the first row of each cell, the cell of each row, and the
    cells' summed bootstrap weights (cells x columns)."""

    rows: np.ndarray
    of_row: np.ndarray
    weight: np.ndarray

    @classmethod
    def of(cls, keys: np.ndarray, weights: np.ndarray) -> _Cells:
        _, rows, of_row = np.unique(keys, return_index=True, return_inverse=True)
        weight = np.zeros((rows.size, weights.shape[1]))
        np.add.at(weight, of_row.ravel(), weights)
        return cls(rows, of_row.ravel(), weight)

    def mean_square(self, values: np.ndarray, totals: np.ndarray) -> np.ndarray:
        """Per column: weighted mean square about the weighted mean of per-cell `values`."""
        centred = values - (self.weight * values).sum(axis=0) / totals
        return (self.weight * centred**2).sum(axis=0) / totals


@dataclass(frozen=True)
class PairStatistics:
    """H statistics of pairs of factors; every array is pairs x (1 + replicates): column 0 on the
    sample, the others on its bootstrap replicates (module docstring)."""

    pairs: list[tuple[str, str]]
    strength: np.ndarray  # raw-score units
    h2: np.ndarray  # unitless, usually in [0, 1]
    share: np.ndarray  # unitless, share of the variance of the raw score


def pair_statistics(
    trees: Trees, sample: np.ndarray, factors: Sequence[str], replicates: int = 0, seed: int = 0
) -> PairStatistics:
    """H^2, strength and share of variance of every pair of `factors`, on a sample and on bootstrap
    replicates of it, computed exactly from the trees.

    With PD_S the partial dependence on the factors S, centred over the sample, and
    r = PD_jk - PD_j - PD_k: H^2 = sum r^2 / sum PD_jk^2, strength = sqrt(mean r^2), share =
    sum r^2 / sum (F - mean F)^2 with F the raw score (module docstring). On a replicate the sums
    and means (and the PDs' averages over the background) are weighted by how often each sample row
    was drawn.

    Parameters
    ----------
    trees : Trees
        The parsed model (its raw score is the sum of the trees' leaf values).
    sample : np.ndarray
        Encoded rows x features, in the model's feature order (categoricals as level codes).
    factors : sequence of str
        At least two distinct feature names of the model; every pair of them is measured.
    replicates : int
        Bootstrap replicates of the sample (0: the sample only).
    seed : int
        Seed of the bootstrap draws.

    Returns
    -------
    PairStatistics
        The pairs in `itertools.combinations` order of `factors`, with strength (raw-score units,
        >= 0), H^2 (0 when the pair's joint PD is flat) and share (0 when the score is flat), each
        pairs x (1 + replicates).

    Raises
    ------
    InputError
        A factor not among the model's features, fewer than two distinct factors, fewer than two
        rows, or a sample whose column count differs from the model's features.
    """
    names = list(trees.feature_names)
    factors = list(factors)
    absent = [f for f in factors if f not in names]
    if absent:
        raise InputError(f"interactions: {absent[0]!r} is not a feature of the model")
    if len(factors) < 2 or len(set(factors)) != len(factors):
        raise InputError(f"interactions: need at least two distinct factors, got {factors}")
    if sample.ndim != 2 or sample.shape[1] != len(names) or sample.shape[0] < 2:
        raise InputError(f"interactions: the sample must be rows x {len(names)} features with at least two rows")
    n = sample.shape[0]
    weights = np.ones((n, 1 + replicates), dtype=np.float32)  # counts of each row: exact
    if replicates:
        weights[:, 1:] = np.random.default_rng(seed).multinomial(n, np.full(n, 1.0 / n), size=replicates).T
    totals = weights.sum(axis=0, dtype=np.float64)
    index = {f: names.index(f) for f in factors}
    value_of = {f: np.unique(sample[:, index[f]], return_inverse=True)[1].ravel() for f in factors}
    cells: dict[str | tuple[str, str], _Cells] = {f: _Cells.of(value_of[f], weights) for f in factors}
    pairs = list(combinations(factors, 2))
    for a, b in pairs:
        cells[(a, b)] = _Cells.of(value_of[a] * n + value_of[b], weights)
    one_way = {f: np.zeros(cells[f].weight.shape) for f in factors}
    residual = {p: np.zeros(cells[p].weight.shape) for p in pairs}
    score = np.zeros(n)
    with threadpool_limits(limits=1, user_api="blas"):  # the same sums whatever the machine
        for tree in trees.trees:
            if tree.split_feature.size == 0:
                continue
            decisions, paths = _decisions(tree, sample), _leaf_paths(tree)
            score += tree.leaf_value @ _reach(paths, decisions).astype(np.float64)
            on = {f: tree.split_feature == index[f] for f in factors if (tree.split_feature == index[f]).any()}
            pd_one = {f: _tree_pd(tree, paths, decisions, nodes, weights) for f, nodes in on.items()}
            for f, (values, group) in pd_one.items():
                one_way[f] += values[group[cells[f].rows]]
            for a, b in combinations([f for f in factors if f in on], 2):
                values, group = _tree_pd(tree, paths, decisions, on[a] | on[b], weights)
                (va, ga), (vb, gb) = pd_one[a], pd_one[b]
                first = np.unique(group, return_index=True)[1]  # the pair's groups refine each factor's
                values -= va[ga[first]] + vb[gb[first]]
                residual[(a, b)] += values[group[cells[(a, b)].rows]]
    score_ms = _Cells(np.arange(n), np.arange(n), weights).mean_square(score[:, None], totals)
    strength, h2, share = (np.zeros((len(pairs), weights.shape[1])) for _ in range(3))
    for p, (a, b) in enumerate(pairs):
        pair_cells = cells[(a, b)]
        r = residual[(a, b)] / totals
        joint = (one_way[a][value_of[a][pair_cells.rows]] + one_way[b][value_of[b][pair_cells.rows]]) / totals + r
        r_ms, joint_ms = pair_cells.mean_square(r, totals), pair_cells.mean_square(joint, totals)
        strength[p] = np.sqrt(r_ms)
        h2[p] = np.divide(r_ms, joint_ms, out=np.zeros_like(r_ms), where=joint_ms > 0)
        share[p] = np.divide(r_ms, score_ms, out=np.zeros_like(r_ms), where=score_ms > 0)
    return PairStatistics(pairs, strength, h2, share)


# ---------------------------------------------------------------------------------------------
# the reference for noise


def null_books(
    label: np.ndarray,
    weight: np.ndarray,
    claims: np.ndarray,
    mean: np.ndarray,
    power: float,
    count: int,
    rng: np.random.Generator,
) -> Iterator[np.ndarray]:
    """Labels of books whose expected label is a surrogate's mean and whose noise is of the book's
    kind: claim counts N*_i ~ Poisson(lambda_i) and, for a pure premium, each claim an amount
    c_i x z with z drawn from the book's own claim sizes relative to their expected size:
        lambda_i = w_i m_i^(2-p) / (phi (2-p)),   c_i = w_i m_i / lambda_i   (money per claim),
    phi set so that sum_i lambda_i is the book's claim count (a Tweedie model of power p puts
    m^(2-p) in the frequency and m^(p-1) in the claim size); z_k = (amount_k / N_k) / c_k on the
    rows with claims, drawn in proportion to N_k and scaled to mean 1, keeps the book's tail of
    large claims. With p = 1 (frequency) lambda_i = w_i m_i and the label is the count alone.
    label*_i = (the row's simulated amount, or count) / w_i, so E label*_i = m_i.

    Parameters
    ----------
    label : np.ndarray
        The modelled rate per row: claims or money per exposure unit, >= 0.
    weight : np.ndarray
        Exposure units per row, > 0.
    claims : np.ndarray
        Claim count per row, >= 0, at least one claim in all.
    mean : np.ndarray
        The surrogate's prediction per row (same units as `label`), > 0.
    power : float
        Variance power p of the model: 1 (frequency, Poisson) or in (1, 2) (pure premium, Tweedie).
    count : int
        Books to draw.
    rng : np.random.Generator
        Draws the counts and claim sizes.

    Yields
    ------
    np.ndarray
        label* of one book, per row (the weights are the book's).

    Raises
    ------
    InputError
        A power outside [1, 2) or a book without claims.
    """
    if not 1.0 <= power < 2.0:
        raise InputError(f"interactions: variance power {power!r} must be in [1, 2) (frequency or pure premium)")
    total_claims = float(claims.sum())
    if total_claims <= 0:
        raise InputError("interactions: the training rows hold no claims")
    if power == 1.0:
        for _ in range(count):
            yield rng.poisson(weight * mean) / weight
        return
    frequency = weight * mean ** (2.0 - power)
    frequency *= total_claims / frequency.sum()  # phi (2 - p) set by the claim count
    size = weight * mean / frequency
    with_claims = np.flatnonzero(claims > 0)
    relative = label[with_claims] * weight[with_claims] / claims[with_claims] / size[with_claims]
    chance = claims[with_claims] / total_claims
    relative /= float(chance @ relative)
    for _ in range(count):
        drawn = rng.poisson(frequency)
        row = np.repeat(np.arange(label.size), drawn)
        amounts = size[row] * relative[rng.choice(relative.size, size=row.size, p=chance)]
        yield np.bincount(row, weights=amounts, minlength=label.size) / weight


@dataclass(frozen=True)
class NoiseTest:
    """Each pair's p-value against the refits' strengths, and whether it stands out from noise."""

    p_value: np.ndarray
    stands_out: np.ndarray
    log_sd: float  # pooled standard deviation of log strength across refits
    degrees_of_freedom: int


def noise_test(observed: np.ndarray, null: np.ndarray, level: float = DEFAULT_LEVEL) -> NoiseTest:
    """Whether each pair's strength stands out from the strengths of the pairs in refits to books
    without their interaction.

    With l = log max(strength, NEGLIGIBLE_STRENGTH), per pair the null mean m of l over the R refits
    and a pooled standard deviation s = sqrt(sum (l_null - m)^2 / df), df = (R - 1) x the number of
    pairs whose null strengths are not all at the floor:
        t = (l_observed - m) / (s sqrt(1 + 1/R)),   p = P(T_df > t),
    With s = 0 (every null at the floor) p is 0 for an observed strength above the floor and 1
    otherwise. A pair stands out when p < level / P for P pairs (Bonferroni) and its strength is at
    least NOISE_MARGIN times the largest of its own null strengths: with a few refits the normal tail
    is a rough guide (a small model's noise interactions come from a handful of trees, and the
    surrogate's main effects are smoother than the book's), so a pair must also clearly beat what the
    booster fitted to noise for that pair. The margin is per pair because the noise differs by pair:
    a 300-level territory fits noise interactions with anything, a 3-level factor few.

    Parameters
    ----------
    observed : np.ndarray
        Strength of each of P pairs on the fitted model (raw-score units).
    null : np.ndarray
        R x P strengths of the same pairs on R >= 2 refits.
    level : float
        Family-wise level over the P pairs, in (0, 1).

    Returns
    -------
    NoiseTest
        p-values, stands_out flags, s and df.

    Raises
    ------
    InputError
        Fewer than two refits, shapes that disagree, or a level outside (0, 1).
    """
    if null.ndim != 2 or null.shape[0] < 2 or null.shape[1] != observed.size:
        raise InputError(f"noise test: need at least two refits of {observed.size} pairs, got shape {null.shape}")
    if not 0 < level < 1:
        raise InputError(f"noise test: level {level!r} must be in (0, 1)")
    refits, pairs = null.shape
    log_null = np.log(np.maximum(null, NEGLIGIBLE_STRENGTH))
    centre = log_null.mean(axis=0)
    gap = np.log(np.maximum(observed, NEGLIGIBLE_STRENGTH)) - centre
    df = int((refits - 1) * (null > NEGLIGIBLE_STRENGTH).any(axis=0).sum())
    sd = float(np.sqrt(((log_null - centre) ** 2).sum() / df)) if df else 0.0
    if sd > 0:
        p_value = stats.t.sf(gap / (sd * np.sqrt(1 + 1 / refits)), df)
    else:
        p_value = np.where(gap > 0, 0.0, 1.0)
    return NoiseTest(p_value, (p_value < level / pairs) & (observed >= NOISE_MARGIN * null.max(axis=0)), sd, df)


def _interval(values: np.ndarray) -> list[float] | None:
    """The bootstrap interval of one figure: INTERVAL_PERCENTILES of its replicates (None without)."""
    return [float(v) for v in np.percentile(values, INTERVAL_PERCENTILES)] if values.size else None


def _surrogate_mean(
    model: GbmModel, data: TrainingData, kept: list[tuple[str, str]], rng: np.random.Generator
) -> np.ndarray:
    """The surrogate's mean per row: the model's setting with every factor alone in its trees except
    the pairs `kept` (LightGBM's interaction_constraints), trained on a random SURROGATE_TRAIN share
    of the policies and stopped when its deviance on the others has not improved for
    SURROGATE_PATIENCE rounds, so that its main effects are as fully fitted as the book allows
    (stopped at the model's rounds, a slowly learning additive model would be flatter than the book)."""
    names = data.feature_names
    paired = {names.index(f) for pair in kept for f in pair}
    allowed = [[names.index(a), names.index(b)] for a, b in kept]
    allowed += [[i] for i in range(len(names)) if i not in paired]
    policies = np.unique(data.groups)
    fitted = np.isin(data.groups, rng.choice(policies, int(SURROGATE_TRAIN * policies.size), replace=False))

    def part(rows: np.ndarray) -> lgb.Dataset:
        subset = replace(data, matrix=data.matrix[rows], label=data.label[rows], weight=data.weight[rows])
        return subset.dataset()

    train_set = part(fitted)
    params = {**model.params, "interaction_constraints": allowed, "metric": model.objective}
    booster = lgb.train(
        params,
        train_set,
        num_boost_round=SURROGATE_MAX_ROUNDS,
        valid_sets=[part(~fitted).set_reference(train_set)],
        callbacks=[lgb.early_stopping(SURROGATE_PATIENCE, verbose=False)],
    )
    return np.asarray(
        booster.predict(data.matrix, num_iteration=booster.best_iteration, num_threads=params["num_threads"])
    )


def _null_strengths(
    model: GbmModel,
    data: TrainingData,
    claims: np.ndarray,
    trees_sample: tuple[np.ndarray, list[str]],
    kept: list[tuple[str, str]],
    refits: int,
    rng: np.random.Generator,
) -> np.ndarray:
    """refits x pairs: every pair's strength on the model's setting and rounds refitted to null books
    of a surrogate that keeps only the interactions of the pairs `kept`."""
    from premiumlab.models.gbm.fit import fit_final

    sample, factors = trees_sample
    mean = _surrogate_mean(model, data, kept, rng)
    power = TARGETS[data.target].deviance_power(model.params.get("tweedie_variance_power"))
    strengths = []
    for label in null_books(data.label, data.weight, claims, mean, power, refits, rng):
        refit = fit_final(replace(data, label=label), model.params, model.best_rounds)
        strengths.append(pair_statistics(Trees.from_text(refit.model_text()), sample, factors).strength[:, 0])
    return np.array(strengths)


def rank_interactions(
    model: GbmModel,
    data: TrainingData,
    claims: np.ndarray,
    seed: int,
    sample_size: int = DEFAULT_SAMPLE,
    factors: int = DEFAULT_FACTORS,
    replicates: int = DEFAULT_REPLICATES,
    refits: int = DEFAULT_REFITS,
    level: float = DEFAULT_LEVEL,
    max_rounds: int = DEFAULT_ROUNDS,
) -> dict:
    """Pairs of a boosted model's top factors ranked by interaction strength, each with its H^2,
    bootstrap intervals, its strength on refits to books without its interaction, a p-value and
    whether it stands out from noise (module docstring); the pairs that do are the candidates for a
    rating table's two-way tables.

    The test runs in rounds: round 1 against books with no interaction at all; when pairs stand
    out, the strongest is kept and the other pairs are tested again against books whose surrogate
    keeps the interactions found so far (a real interaction also changes the noise the booster
    fits around its factors), until no further pair stands out or `max_rounds` rounds have run.
    Each pair reports the round it was last tested in.

    Parameters
    ----------
    model : GbmModel
        The fitted model (its setting and rounds are reused for the surrogates and refits).
    data : TrainingData
        The training data it was fitted on (rows, label, weight, encoded matrix).
    claims : np.ndarray
        Claim count of each row of `data`.
    seed : int
        Seed of the sample, the bootstrap and the null books.
    sample_size : int
        Training rows sampled (without replacement) for the statistic.
    factors : int
        The top factors by total split gain whose pairs are measured.
    replicates : int
        Bootstrap replicates of the sample (0: no intervals).
    refits : int
        Books without the interaction the booster is refitted to per round, >= 2.
    level : float
        Family-wise level of the test over the pairs of a round, in (0, 1).
    max_rounds : int
        Most rounds of the test, >= 1.

    Returns
    -------
    dict
        JSON-able, as docs/run-directory.md describes interactions.json: model, sample, factors,
        replicates, refits, level, rounds (per round: the pairs kept in its books, pairs tested,
        log_sd, degrees_of_freedom), pairs (ranked by strength: strength, share and h2 with their
        intervals, round, null_strength, p_value, stands_out), candidates, and a note when the
        rounds ran out or when fewer than two factors have a gain (then no pairs).
    """
    top = top_factors_by_gain(model.booster, factors)
    head = {"model": model.target, "factors": top, "replicates": replicates, "refits": refits, "level": level}
    if len(top) < 2:
        note = "the boosted model splits on fewer than two factors, so it has no interactions"
        return {**head, "sample": 0, "rounds": [], "pairs": [], "candidates": [], "note": note}
    rng = np.random.default_rng(seed)
    rows = np.sort(rng.choice(data.label.size, min(sample_size, data.label.size), replace=False))
    sample = data.matrix[rows]
    found = pair_statistics(Trees.from_text(model.model_text()), sample, top, replicates, seed)
    strength = found.strength[:, 0]
    kept: list[int] = []
    tested: dict[int, dict] = {}
    rounds = []
    for number in range(1, max_rounds + 1):
        null = _null_strengths(model, data, claims, (sample, top), [found.pairs[k] for k in kept], refits, rng)
        open_pairs = [p for p in range(len(found.pairs)) if p not in kept]
        test = noise_test(strength[open_pairs], null[:, open_pairs], level)
        rounds.append(
            {
                "kept_in_books": [list(found.pairs[k]) for k in kept],
                "pairs_tested": len(open_pairs),
                "log_sd": test.log_sd,
                "degrees_of_freedom": test.degrees_of_freedom,
            }
        )
        for i, p in enumerate(open_pairs):
            tested[p] = {
                "round": number,
                "null_strength": [float(v) for v in null[:, p]],
                "p_value": float(test.p_value[i]),
                "stands_out": bool(test.stands_out[i]),
            }
        standing = [p for i, p in enumerate(open_pairs) if test.stands_out[i]]
        if not standing or len(open_pairs) == 1:
            break
        kept.append(max(standing, key=lambda p: strength[p]))
    pairs = [
        {
            "pair": list(found.pairs[p]),
            "strength": float(strength[p]),
            "strength_interval": _interval(found.strength[p, 1:]),
            "share": float(found.share[p, 0]),
            "share_interval": _interval(found.share[p, 1:]),
            "h2": float(found.h2[p, 0]),
            "h2_interval": _interval(found.h2[p, 1:]),
            **tested[p],
        }
        for p in np.argsort(-strength, kind="stable")
    ]
    ranking = {
        **head,
        "sample": int(rows.size),
        "rounds": rounds,
        "pairs": pairs,
        "candidates": [entry["pair"] for entry in pairs if entry["stands_out"]],
        "caution": DRAFT,
    }
    if len(rounds) == max_rounds and standing and len(open_pairs) > 1:
        ranking["note"] = (
            f"the test stopped after {max_rounds} rounds; the pairs that stood out in the last round were not "
            "tested again against books keeping the strongest of them"
        )
    return ranking
