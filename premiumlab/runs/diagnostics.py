"""The diagnostics of a run (`premiumlab._core.diagnostics`): gathered from the steps that found them,
de-duplicated, for run.json's `diagnostics` and for the outputs that repeat them (`compare`, `report`).

`fit` writes run.json's `diagnostics` as `merge_diagnostics(model_warnings(run), <the run's other
findings>...)`; `write_json` turns each Diagnostic into its dict.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from premiumlab._core.diagnostics import Diagnostic
from premiumlab._core.jsonio import read_json
from premiumlab.runs.rundir import RunDir


def merge_diagnostics(*groups: Iterable[Diagnostic | Mapping[str, Any]]) -> list[Diagnostic]:
    """The diagnostics of several sources as one list, each once, in the order first met.

    Parameters
    ----------
    *groups : iterables of Diagnostic or of its dict (`Diagnostic.to_dict`)
        The sources, e.g. the GLM model JSONs' `warnings`, the book's unseen levels and missing
        values, a comparison's own findings.

    Returns
    -------
    list of Diagnostic
        Every distinct diagnostic (equal kind, model, message, factor and level count once).

    Raises
    ------
    ValueError
        When a dict names a kind that is not in `KINDS`.
    """
    seen: dict[Diagnostic, None] = {}
    for group in groups:
        for item in group:
            seen.setdefault(item if isinstance(item, Diagnostic) else Diagnostic.from_dict(dict(item)), None)
    return list(seen)


def model_warnings(files: RunDir) -> list[Diagnostic]:
    """The `warnings` of the run's GLM model JSONs (models/glm_*.json), in target order, each once.

    Parameters
    ----------
    files : RunDir
        The run directory (while `fit` writes it, or after).

    Returns
    -------
    list of Diagnostic
        Each model's `warnings` (a list of Diagnostic dicts; a file without the key has none).
    """
    return merge_diagnostics(
        *(read_json(files.model_json("glm", t)).get("warnings", []) for t in files.model_targets("glm"))
    )
