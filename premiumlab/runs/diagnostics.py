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


#: A factor's between-level standard deviation tau (log relativity) below this counts as held at the
#: base by the credibility penalty; above FOUND_TAU, as a spread the data show.
HELD_TAU = 0.01
FOUND_TAU = 0.05


def held_at_base(credibility: Mapping[str, Mapping[str, Mapping[str, Any]]]) -> list[Diagnostic]:
    """Factors that the pure-premium GLM's penalty holds at the base although the frequency GLM finds them.

    The pure premium is frequency times severity, so a factor whose claim frequency varies (tau of
    the frequency GLM > FOUND_TAU) varies in the pure premium too, unless its severity offsets it
    exactly. When the pure-premium GLM's tau is below HELD_TAU nonetheless, its marginal likelihood
    saw the spread as noise: typically a dispersion inflated by a few very large losses.

    Parameters
    ----------
    credibility : mapping
        Per GLM target (`frequency`, `pure_premium`, ...), the model JSON's `credibility`:
        {factor: {"tau": float, ...}}, tau the standard deviation of the factor's log relativities.

    Returns
    -------
    list of Diagnostic
        One `held_at_base` warning per such factor, naming both taus; none when either model is
        absent or unpenalised.
    """
    frequency, pure = credibility.get("frequency", {}), credibility.get("pure_premium", {})
    found = []
    for factor, fitted in pure.items():
        tau, spread = float(fitted["tau"]), float(frequency.get(factor, {}).get("tau", 0.0))
        if tau < HELD_TAU and spread > FOUND_TAU:
            found.append(
                Diagnostic(
                    kind="held_at_base",
                    model="glm_pure_premium",
                    factor=factor,
                    message=(
                        f"the credibility penalty holds every level of '{factor}' at the base (tau {tau:.2g}) "
                        f"although the frequency GLM finds a spread (tau {spread:.2g} on the log scale); "
                        "a few very large losses often hide it: consider [experience] large_loss_cap"
                    ),
                )
            )
    return found


def model_warnings(files: RunDir) -> list[Diagnostic]:
    """The `warnings` of the run's GLM model JSONs (models/glm_*.json), in target order, each once,
    then the factors `held_at_base` across them.

    Parameters
    ----------
    files : RunDir
        The run directory (while `fit` writes it, or after).

    Returns
    -------
    list of Diagnostic
        Each model's `warnings` (a list of Diagnostic dicts; a file without the key has none),
        then `held_at_base` of the models' `credibility`.
    """
    models = {t: read_json(files.model_json("glm", t)) for t in files.model_targets("glm")}
    credibility = {t: model.get("credibility") or {} for t, model in models.items()}
    return merge_diagnostics(*(model.get("warnings", []) for model in models.values()), held_at_base(credibility))
