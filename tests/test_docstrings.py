"""Every public function documents its parameters and its result in numpydoc sections.

Public: a module-level function whose name and module path have no leading underscore, in
premiumlab or rating_tables. The typer commands of `premiumlab/cli/app.py` are left out: their
docstring is the command's --help text, and their options carry their own help.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("premiumlab", "rating_tables")
NOT_CHECKED = {Path("premiumlab/cli/app.py"), Path("premiumlab/__main__.py")}


def _public_functions():
    for package in PACKAGES:
        for path in sorted((ROOT / package).rglob("*.py")):
            relative = path.relative_to(ROOT)
            if relative in NOT_CHECKED or any(
                part.startswith("_") and part != "__init__.py" for part in relative.parts
            ):
                continue
            tree = ast.parse(path.read_text(encoding="utf-8"))
            for node in tree.body:
                if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and not node.name.startswith("_"):
                    yield relative, node


def _parameters(node: ast.FunctionDef) -> list[str]:
    args = node.args
    names = [a.arg for a in args.posonlyargs + args.args + args.kwonlyargs]
    names += [a.arg for a in (args.vararg, args.kwarg) if a is not None]
    return [n for n in names if n not in ("self", "cls")]


def _returns_something(node: ast.FunctionDef) -> bool:
    annotation = node.returns
    return not (annotation is None or (isinstance(annotation, ast.Constant) and annotation.value is None))


def test_public_functions_have_numpydoc_parameters_and_returns():
    missing = []
    for relative, node in _public_functions():
        doc = ast.get_docstring(node) or ""
        where = f"{relative}:{node.lineno} {node.name}"
        if _parameters(node) and "Parameters\n----------" not in doc:
            missing.append(f"{where}: no Parameters section")
        if _returns_something(node) and not any(s in doc for s in ("Returns\n-------", "Yields\n------")):
            missing.append(f"{where}: no Returns (or Yields) section")
    assert not missing, f"{len(missing)} gaps:\n" + "\n".join(missing)
