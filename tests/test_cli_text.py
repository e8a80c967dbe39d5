"""The command line's text: one number format per column, plain wide tables into a pipe, the
truncation note of `certify` and the demo's closing list (docs/commands.md, "What the terminal shows").
Figures are invented; only the formatting is under test."""

from __future__ import annotations

import io
from pathlib import Path

import pandas as pd
from rich.console import Console

from premiumlab.cli.console import PLAIN_WIDTH
from premiumlab.cli.format import certificate_lines, demo_summary_lines
from premiumlab.cli.tables import capping_table, profile_table
from premiumlab.results import Certificate, DemoResult


def plain(renderable) -> str:
    out = io.StringIO()
    Console(file=out, no_color=True, width=PLAIN_WIDTH, soft_wrap=True).print(renderable)
    return out.getvalue()


def test_profile_columns_have_one_format_each():
    frame = pd.DataFrame(
        {
            "exposure": [4020.04, 10290.5],
            "claims": [40.0, 1203.0],
            "amount": [199351.2, 2595080.0],
            "frequency": [0.0099503, 0.1169],
            "severity": [4983.78, 2157.2],
            "loss_cost": [49.59, 252.19],
        },
        index=pd.Index(["young", "old"], name="age"),
    )
    text = plain(profile_table("age", frame))
    assert "e+0" not in text
    old = next(line for line in text.splitlines() if line.startswith("old"))
    assert old.split() == ["old", "10,290.5", "1,203", "2,595,080", "0.1169", "2,157", "252.19"]
    young = next(line for line in text.splitlines() if line.startswith("young"))
    assert young.split()[1:3] == ["4,020.0", "40"] and young.index("4,020.0") > young.index("young") + 5


def test_capping_figures_are_named_and_formatted():
    text = plain(capping_table({"cap": 0.15, "capped_up": 4360, "total_capped": 95183600.0, "off_balance": -0.019981}))
    assert "15.0%" in text and "4,360" in text and "95,183,600.00" in text and "-2.00%" in text
    assert "e+0" not in text and "\x1b[" not in text


def certificate(listed: int, count: int) -> Certificate:
    violation = {"tree": 1, "leaves": [0, 1], "values": [0.2, 0.1], "amount": 0.1}
    return Certificate(
        model=Path("m.txt"),
        feature="age",
        feature_index=0,
        direction=1,
        monotone=False,
        trees_checked=10,
        trees_splitting_on_feature=5,
        leaf_pairs_checked=80,
        violation_count=count,
        max_violation=0.1,
        trees_with_violations=(1,),
        violations=tuple(violation for _ in range(listed)),
        cautions=(),
    )


def test_certify_says_how_many_violations_it_did_not_print():
    assert "920 more not printed" in certificate_lines(certificate(50, 970))[1]
    assert not any("not printed" in line for line in certificate_lines(certificate(3, 3)))


def test_demo_summary_names_the_outputs_and_what_to_run_next():
    files = ("run/report.html", "table/exhibit.xlsx", "table/table.json", "priced.parquet", "impact.json")
    steps = [("[1/7] simulated", 1.25), ("fit: GLM frequency fitted", 3.0), ("[2/7] fitted", 95.0)]
    lines = demo_summary_lines(DemoResult(out=Path("demo-output"), files=files, cautions=()), steps)
    assert "  report         demo-output/run/report.html" in lines
    assert "  rating table   demo-output/table/" in lines
    assert not any("glm_table" in line for line in lines[:8])  # not written here, so not listed
    assert "time per step: [1/7] 1.2 s, [2/7] 1 min 35 s; in all 1 min 36 s" in lines
    assert any(line.startswith("  premiumlab report demo-output/run --table demo-output/table") for line in lines)
