"""premiumlab: GLM baselines, boosted trees and banded rating tables for insurance pricing.

The public functions are imported lazily so that the command line starts fast:
`premiumlab.fit`, `premiumlab.load_spec`, `premiumlab.load_book`, `premiumlab.simulate`, ...
"""
from __future__ import annotations

from importlib import import_module

__version__ = "0.1.0"

_PUBLIC = {
    "fit": "premiumlab.pipeline",
    "open_run": "premiumlab.pipeline",
    "load_spec": "premiumlab.spec",
    "load_book": "premiumlab.data",
    "profile": "premiumlab.data",
    "simulate": "premiumlab.simulate",
    "validate_book": "premiumlab.validation",
    "compare": "premiumlab.comparison",
    "tabulate": "premiumlab.tabulate",
    "write_report": "premiumlab.report",
    "run_demo": "premiumlab.demo",
}


def __getattr__(name: str):
    if name in _PUBLIC:
        value = getattr(import_module(_PUBLIC[name]), name)
        # importing premiumlab.simulate sets the submodule as an attribute of the package;
        # the function of the same name must win
        globals()[name] = value
        return value
    raise AttributeError(f"module 'premiumlab' has no attribute {name!r}")


__all__ = sorted(_PUBLIC)
