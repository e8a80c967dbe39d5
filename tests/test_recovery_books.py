"""Simulator recovery on books unlike motor: the default table (GLMs only) of four scenarios.

Invented data: the shipped scenarios at their own sizes, each fitted as given with its spec (GLMs
only) and tabulated with the default source (`--model auto`, here glm or glm_freq_sev):
- `property` (200,000 policies; 300 territories, 30 % under 50 policies; alarm missing on about
  5 %; U-shaped and decreasing numeric effects; a promised ordinal; occupancy x construction; a
  Pareto tail, capped at 250,000 by the spec);
- `interaction` (60,000; a strong driver_experience x gross_weight interaction);
- `heavy_tail` (80,000; Pareto tail index 1.25, large losses about 70 % of the amount, no cap);
- `household` (80,000; building_age x construction).

Measures (`premiumlab.simulation.recovery.table_recovery`, holdout rows, exposure-weighted): per
factor the share of the true variance of its log relativity that the table explains (a factor of a
two-way table: the pair's joint effect), and the policy-level error against the truth beside the
GLMs'. Thresholds from issue 14 ("what it must show"): on `property` and `interaction` each factor
at least 0.75; on every book the table's error at most the best candidate's plus 0.02; on
`property` no GLM relativity of a territory under 50 policies outside [0.3, 3]. The heavy-tailed
books are held to the error criterion only: their lowest shares when written were 0.30 (heavy_tail,
trade) and 0.58 (household, building_age x construction), figures in the session note.

Measured when written (errors: table / best GLM): property 0.188 / 0.241 (lowest share territory
0.769), interaction 0.078 / 0.232 (0.939), heavy_tail 0.297 / 0.297, household 0.208 / 0.195.
Marked `load` (GLM fits on up to 375,000 rows): run by `.ci/run` with `-m load`.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import premiumlab
import rating_tables
from premiumlab.simulation.recovery import policy_error, table_recovery, true_pure_premium
from premiumlab.simulation.scenario_file import load_scenario
from premiumlab.simulation.simulator import generate

ROOT = Path(__file__).resolve().parents[1]
SCENARIOS = ("property", "interaction", "heavy_tail", "household")
EVERY_FACTOR_AT_LEAST = {"property": 0.75, "interaction": 0.75}
pytestmark = pytest.mark.load


@pytest.fixture(scope="module", params=SCENARIOS)
def recovered(request, tmp_path_factory):
    name = request.param
    base = tmp_path_factory.mktemp(f"recovery_{name}")
    scenario = load_scenario(ROOT / "scenarios" / f"{name}.toml")
    drawn = generate(scenario, None, None)
    book = base / "book.parquet"
    drawn.book.to_parquet(book, index=False)
    premiumlab.fit(book, spec=ROOT / "scenarios" / f"{name}_spec.toml", out=base / "run", models="glm")
    premiumlab.tabulate(base / "run", out=base / "table")
    preds = pd.read_parquet(base / "run" / "predictions.parquet")
    rows = np.flatnonzero(preds["holdout"].to_numpy(bool))
    weight = drawn.book["exposure"].to_numpy()[rows]
    rated = rating_tables.rate(rating_tables.load(base / "table"), drawn.book.iloc[rows], "exposure")
    shares, error = table_recovery(scenario, drawn.effects, rated, rows, weight)
    truth = true_pure_premium(scenario, drawn.effects)[rows]
    candidates = {
        column: policy_error(truth, preds[column].to_numpy()[rows], weight)
        for column in ("glm_pure_premium", "glm_freq_x_sev")
    }
    fidelity = json.loads((base / "table" / "fidelity.json").read_text())
    return name, drawn.book, base / "run", shares, error, candidates, fidelity


def test_the_default_table_explains_three_quarters_of_every_factor(recovered):
    name, _, _, shares, _, _, fidelity = recovered
    if name not in EVERY_FACTOR_AT_LEAST:
        pytest.skip("a heavy-tailed book: held to the error criterion only (module docstring)")
    assert fidelity["source"]["requested"] == "auto"
    assert min(shares.values()) >= EVERY_FACTOR_AT_LEAST[name], shares


def test_the_default_table_is_no_worse_than_the_best_candidate_plus_0_02(recovered):
    _, _, _, _, error, candidates, _ = recovered
    assert error <= min(candidates.values()) + 0.02, (error, candidates)


def test_no_glm_relativity_of_a_thin_territory_is_outside_0_3_to_3(recovered):
    name, book, run, _, _, _, _ = recovered
    if name != "property":
        pytest.skip("only the property scenario has territories")
    policies = book.groupby("territory", observed=True)["policy_id"].nunique()
    thin = set(policies[policies < 50].index.astype(str))
    assert len(thin) >= 50
    for target in ("frequency", "severity", "pure_premium"):
        model = json.loads((run / "models" / f"glm_{target}.json").read_text())
        values = [v for level, v in model["relativities"]["territory"].items() if level in thin]
        assert values and min(values) >= 0.3 and max(values) <= 3.0, (target, min(values), max(values))
