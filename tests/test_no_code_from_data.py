"""Nothing executes from data: no unpickling or code evaluation in the package, and table files stay
inside their folder.

The first part reads the syntax tree of every module of premiumlab/ and rating_tables/ (Python's `ast`
module, so a word in a comment or a string cannot hide or fake a finding). The second part runs the
refusals of docs/rating-table.md, Validation rules (a factor's `file` must stay inside the table
folder) through the command line, with a real file waiting outside the table so that the refusal
cannot be mistaken for a missing file.
"""

from __future__ import annotations

import ast
import hashlib
import json
import os
import shutil
from pathlib import Path

import pytest

import rating_tables

from _builders import ROOT, example_book, example_table, run_cli

PACKAGES = ("premiumlab", "rating_tables")
#: Modules that turn bytes into objects that may run code, or store them so.
UNSAFE_MODULES = {"pickle", "_pickle", "cPickle", "joblib", "cloudpickle", "dill", "marshal", "shelve"}
#: Built-ins that run text as code.
UNSAFE_CALLS = {"eval", "exec", "compile", "__import__"}
#: Methods that (un)pickle under another name.
UNSAFE_METHODS = {"read_pickle", "to_pickle"}


def findings(source: str, name: str) -> list[str]:
    """Every unsafe import, call or argument in the module text `source`, as 'name:line: what'."""
    tree = ast.parse(source, filename=name)
    called = {id(node.func) for node in ast.walk(tree) if isinstance(node, ast.Call)}
    found = []
    for node in ast.walk(tree):
        where = f"{name}:{getattr(node, 'lineno', 0)}"
        if isinstance(node, ast.Import):
            found += [f"{where}: import {a.name}" for a in node.names if a.name.split(".")[0] in UNSAFE_MODULES]
        elif isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] in UNSAFE_MODULES:
            found.append(f"{where}: from {node.module} import")
        elif isinstance(node, ast.Call):
            func = node.func
            if isinstance(func, ast.Name) and func.id in UNSAFE_CALLS:
                found.append(f"{where}: call {func.id}()")
            elif isinstance(func, ast.Attribute) and (
                func.attr in UNSAFE_METHODS
                or (func.attr in UNSAFE_CALLS and isinstance(func.value, ast.Name) and func.value.id == "builtins")
            ):
                found.append(f"{where}: call .{func.attr}()")
            for kw in node.keywords:
                if kw.arg == "pickle":
                    found.append(f"{where}: argument pickle=")
                elif kw.arg == "allow_pickle" and not (isinstance(kw.value, ast.Constant) and kw.value.value is False):
                    found.append(f"{where}: argument allow_pickle=")
        elif (
            isinstance(node, ast.Name)
            and node.id in UNSAFE_CALLS
            and isinstance(node.ctx, ast.Load)
            and id(node) not in called
        ):
            found.append(f"{where}: reference to {node.id}")  # e.g. f = eval; f(text)
    return found


def _modules() -> list[Path]:
    return sorted(p for pkg in PACKAGES for p in (ROOT / pkg).rglob("*.py"))


def test_the_checker_finds_each_kind_of_unsafe_code():
    """The checker itself must catch every form it looks for (else the package test below proves nothing)."""
    bad = (
        "import pickle\nimport joblib.numpy_pickle\nfrom dill import loads\nimport marshal, shelve\n"
        "eval('1')\nexec('x = 1')\ncompile('1', 'f', 'eval')\n__import__('os')\nbuiltins.eval('2')\n"
        "pd.read_pickle('f')\ndf.to_pickle('f')\nnp.load('f', allow_pickle=True)\nsave(x, pickle=True)\n"
        "run = exec\n"
    )
    assert len(findings(bad, "bad.py")) == 15
    fine = (
        "import re\nre.compile('a')\nnp.load('f', allow_pickle=False)\njson.loads('{}')\n"
        "model.evaluate(1)\nliteral_eval = None\n"
    )
    assert findings(fine, "fine.py") == []


def test_the_package_has_no_unpickling_or_code_evaluation():
    modules = _modules()
    assert len(modules) >= 30  # both packages were found
    found = [f for path in modules for f in findings(path.read_text(encoding="utf-8"), str(path.relative_to(ROOT)))]
    assert found == []


def test_boosted_models_are_read_only_from_lightgbm_text():
    """Every LightGBM model the package builds from a file or string is given text (model_str or model_file)."""
    calls = []
    for path in _modules():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call) and getattr(node.func, "attr", getattr(node.func, "id", "")) == "Booster":
                calls.append({kw.arg for kw in node.keywords})
    assert calls, "no Booster construction found"
    assert all(kw and kw <= {"model_str", "model_file", "params", "train_set"} for kw in calls), calls


# ------------------------------------------------------------------------- factor files leaving TABLE


def _digest_tree(folder: Path) -> dict[str, str]:
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest() if p.is_file() else "<dir>"
        for p in sorted(folder.rglob("*"))
    }


def _escape_table(base: Path, how: str) -> Path:
    """The example table with its bonus file outside the folder, reached by `how`."""
    folder = base / "table"
    rating_tables.save(example_table(), folder)
    outside = base / "bonus.csv"
    shutil.move(folder / "factors" / "bonus.csv", outside)
    if how == "symlink":
        os.symlink(outside, folder / "factors" / "bonus.csv")
        return folder
    meta = json.loads((folder / "table.json").read_text())
    entry = next(e for e in meta["factors"] if e["name"] == "bonus")
    entry["file"] = "../bonus.csv" if how == "dotdot" else str(outside)
    (folder / "table.json").write_text(json.dumps(meta, indent=2))
    return folder


ESCAPES = [
    ("dotdot", "file '../bonus.csv' uses '..' and would leave the table folder"),
    ("absolute", "is an absolute path; it must be relative to the table folder"),
    ("symlink", "factors/bonus.csv: factor 'bonus': the path resolves outside the table folder"),
]


@pytest.mark.parametrize("how, message", ESCAPES, ids=[e[0] for e in ESCAPES])
def test_rate_and_audit_refuse_a_factor_file_outside_the_table(tmp_path, how, message):
    """docs/commands.md: `rate` exits 2 with one line naming the file; `audit` reports a violation (exit 1)."""
    folder = _escape_table(tmp_path, how)
    example_book().to_csv(tmp_path / "policies.csv", index=False)
    before = _digest_tree(tmp_path)
    r = run_cli("rate", str(folder), str(tmp_path / "policies.csv"), "--out", str(tmp_path / "priced.csv"))
    lines = r.stderr.splitlines()
    assert r.returncode == 2 and len(lines) == 1 and message in lines[0], r.stderr
    assert lines[0].startswith(f"premiumlab: {folder}: ")
    a = run_cli("audit", str(folder))
    assert a.returncode == 1 and message in a.stdout and "1 violation(s)" in a.stdout, a.stdout + a.stderr
    assert "Traceback" not in r.stderr + a.stderr
    assert _digest_tree(tmp_path) == before  # nothing written, the outside file untouched
