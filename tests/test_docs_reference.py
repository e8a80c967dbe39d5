"""docs/spec.md and docs/commands.md against the code they describe: every spec key the reader
accepts and every command and option of the command line has its place on the page, and the
page's example specs are accepted by the reader. The pages are the source of these expectations.
"""

from __future__ import annotations

import dataclasses
import re
import tomllib
from pathlib import Path

import pytest
import typer.main

from premiumlab.book import spec as spec_module
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.cli.app import app

DOCS = Path(__file__).resolve().parents[1] / "docs"
#: Each spec section and the dataclass its keys map onto, less the fields that are no key.
SECTIONS = {
    "columns": (spec_module.Columns, ()),
    "factors.NAME": (spec_module.Factor, ("name",)),
    "split": (spec_module.Split, ("out_of_time",)),
    "glm": (spec_module.GlmOptions, ()),
    "gbm": (GbmOptions, ("seed", "grid")),
    "table": (spec_module.TableOptions, ()),
    "loadings": (spec_module.Loadings, ()),
    "compliance": (spec_module.Compliance, ()),
    "experience": (spec_module.Experience, ()),
}
#: Fields whose spec key has another name.
SPEC_KEY = {"num_threads": "threads"}


def section(text: str, heading: str) -> str:
    """The body of the `## heading` section of a Markdown page, up to the next `## ` heading."""
    start = text.index(f"\n## {heading}\n")
    end = text.find("\n## ", start + 1)
    return text[start:] if end < 0 else text[start:end]


@pytest.mark.parametrize("name", sorted(SECTIONS))
def test_every_spec_key_is_in_its_section(name):
    cls, skipped = SECTIONS[name]
    body = section((DOCS / "spec.md").read_text(encoding="utf-8"), f"`[{name}]`")
    keys = [SPEC_KEY.get(f.name, f.name) for f in dataclasses.fields(cls) if f.name not in skipped]
    missing = [key for key in keys if f"`{key}`" not in body]
    assert missing == []


def test_the_example_specs_are_accepted():
    blocks = re.findall(r"```toml\n(.*?)```", (DOCS / "spec.md").read_text(encoding="utf-8"), re.S)
    assert len(blocks) >= 3
    for block in blocks:
        spec_module.parse_spec(tomllib.loads(block), "docs/spec.md")


def test_every_command_and_option_is_in_commands_md():
    text = (DOCS / "commands.md").read_text(encoding="utf-8")
    group = typer.main.get_command(app)
    for name, command in group.commands.items():
        body = section(text, f"`premiumlab {name}`")
        for param in command.params:
            words = (
                [o for o in param.opts if o != "--help"] if param.param_type_name == "option" else [param.name.upper()]
            )
            for word in words:
                assert f"`{word}" in body, f"{name}: {word}"
