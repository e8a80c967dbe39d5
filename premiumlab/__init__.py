"""premiumlab: GLM baselines, boosted trees and banded rating tables for insurance pricing.

The public functions are imported lazily so that the command line starts fast:
`premiumlab.fit`, `premiumlab.load_spec`, `premiumlab.load_book`, `premiumlab.simulate`, ...
No public function shares its name with a submodule (importing a submodule sets it as an
attribute of the package, which would shadow the function).
"""
from __future__ import annotations

from importlib import import_module

__version__ = "0.1.0"

_PUBLIC = {
    "fit": "premiumlab.runs.fit",
    "open_run": "premiumlab.runs.rundir",
    "load_spec": "premiumlab.book.spec",
    "load_book": "premiumlab.book.scan",
    "simulate": "premiumlab.simulation.simulator",
    "validate_book": "premiumlab.book.validate",
    "compare": "premiumlab.review.comparison",
    "tabulate": "premiumlab.tabulation.from_run",
    "write_report": "premiumlab.review.report",
    "run_demo": "premiumlab.demo_job",
    "threshold_aid": "premiumlab.experience.tails",
}


def __getattr__(name: str):
    if name in _PUBLIC:
        value = getattr(import_module(_PUBLIC[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'premiumlab' has no attribute {name!r}")


__all__ = sorted(_PUBLIC)
