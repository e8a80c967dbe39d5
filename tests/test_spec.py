"""The pricing spec: valid specs parse into typed objects; every refusal names the key."""

from __future__ import annotations

import tomllib

import pytest

from premiumlab._core.errors import InputError
from premiumlab.book.spec import DEFAULT_PROHIBITED, load_spec, parse_spec

from _builders import SPEC_TEXT


def doc(extra: str = "", base: str = SPEC_TEXT) -> dict:
    return tomllib.loads(base + "\n" + extra)


def test_valid_spec_parses_with_documented_defaults(spec_file):
    spec = load_spec(spec_file)
    assert spec.factor_names == ["age", "region", "bonus"]
    age = spec.factor("age")
    assert age.type == "numeric" and age.bands == (25.0, 40.0, 60.0) and age.monotone == "none"
    bonus = spec.factor("bonus")
    assert bonus.levels == ("01", "02", "03") and bonus.direction == 1
    assert spec.split.holdout == 0.2 and spec.split.seed == 7
    assert spec.glm.tweedie_power == "auto" and spec.gbm.folds == 5 and spec.gbm.max_settings == 8
    assert spec.table.relativity_decimals == 3 and spec.loadings.variable_expense == 0.0
    assert "gender" in spec.compliance.prohibited


@pytest.mark.parametrize(
    "extra, base_edit, fragment",
    [
        ("", ("holdout = 0.2", "holdout = 1.5"), "split.holdout"),
        ("", ("seed = 7", "seeds = 3"), "split.seeds' is unknown"),
        ("[glm]\ntweedie_power = 2.5", None, "glm.tweedie_power"),
        ("[gbm]\nfolds = 'five'", None, "gbm.folds' must be an integer"),
        ("[loadings]\nvariable_expense = 0.7\nprofit = 0.3", None, "variable_expense + profit must be below 1"),
        ("[table]\ninteractions = [['age', 'colour_of_car']]", None, "colour_of_car"),
        ("[factors.zone]\ntype = 'categorical'\nmonotone = 'increasing'", None, "unordered categorical"),
        ("[factors.zone]\ntype = 'categorical'\nlevels = ['a', 'a']", None, "lists level 'a' twice"),
        ("[factors.zone]\ntype = 'spatial'", None, "factors.zone.type"),
        ("[factors.zone]\ntype = 'numeric'\nbands = [3, 2]", None, "strictly increasing"),
        ("[factors.zone]\ntype = 'numeric'\ncolour = 1", None, "factors.zone.colour' is unknown"),
        ("[factors.gender]\ntype = 'categorical'", None, "prohibited"),
        ("[factors.exposure]\ntype = 'numeric'", None, "also a column of [columns]"),
        (
            "[experience]\nexcess_load_history = 0.1",
            None,
            "experience.excess_load_history' needs experience.large_loss_cap",
        ),
        (
            "[experience]\ncatastrophe_column = 'cat'",
            None,
            "experience.catastrophe_column' needs experience.claims_file",
        ),
        ("[experience]\ntrend = { inflation = 0.02 }", None, "experience.trend.inflation' is unknown"),
        ("[experience]\ncap = 1000", None, "experience.cap' is unknown"),
        (
            "",
            ("holdout = 0.2", "holdout = 'newest'"),
            "split.holdout' must be a number in [0, 1) or 'latest_period', got 'newest'",
        ),
        ("", ('claim_count = "claim_count"', ""), "columns.claim_count' is required"),
        ("", ('period = "year"', 'period = "exposure"'), "already used"),
        ("[unknown_section]\na = 1", None, "'unknown_section' is unknown"),
    ],
)
def test_refusals_name_the_key(extra, base_edit, fragment):
    base = SPEC_TEXT if base_edit is None else SPEC_TEXT.replace(*base_edit)
    with pytest.raises(InputError, match=None) as info:
        parse_spec(doc(extra, base), source="spec.toml")
    assert fragment in str(info.value)
    assert "\n" not in str(info.value)


def test_factor_named_twice_is_refused_by_toml(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(SPEC_TEXT + "\n[factors.age]\ntype = 'numeric'\n")
    with pytest.raises(InputError, match="malformed TOML"):
        load_spec(p)


def test_prohibited_list_is_configurable():
    d = doc("[compliance]\nprohibited = ['region']")
    with pytest.raises(InputError, match="factor 'region' is prohibited"):
        parse_spec(d)
    ok = parse_spec(doc("[factors.marital]\ntype = 'categorical'\n[compliance]\nprohibited = ['gender']"))
    assert ok.compliance.prohibited == ("gender",)
    assert len(DEFAULT_PROHIBITED) > 5


def test_spec_file_errors(tmp_path):
    with pytest.raises(InputError, match="not found"):
        load_spec(tmp_path / "missing.toml")
    with pytest.raises(InputError, match="is a directory"):
        load_spec(tmp_path)
    bad = tmp_path / "bad.toml"
    bad.write_bytes(b"[columns]\nexposure = \xff\n")
    with pytest.raises(InputError, match="not UTF-8"):
        load_spec(bad)
    bom = tmp_path / "bom.toml"
    bom.write_bytes(b"\xef\xbb\xbf" + SPEC_TEXT.encode())
    assert load_spec(bom).factor_names == ["age", "region", "bonus"]
