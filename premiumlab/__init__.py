"""premiumlab: GLM baselines, boosted trees and banded rating tables for insurance pricing.

One function per command, called as on the command line (`premiumlab.api`):
``premiumlab.fit("book.parquet", spec="spec.toml", out="run")`` is
``premiumlab fit book.parquet --spec spec.toml --out run``. Each returns a frozen dataclass with
``to_dict()``. `load_spec`, `load_book` and `open_run` read a spec, a book and a run directory.

Everything is imported lazily so that the command line starts fast. No public name is also the
name of a submodule (importing a submodule sets it as an attribute of the package, which would
shadow the function).
"""

from importlib import import_module as _import_module

__version__ = "0.1.0"

_COMMANDS = (
    "simulate",
    "validate",
    "fit",
    "compare",
    "tabulate",
    "select",
    "audit",
    "rate",
    "impact",
    "certify",
    "tails",
    "report",
    "demo",
)
_RESULTS = (
    "SimulationResult",
    "Comparison",
    "TableResult",
    "SelectResult",
    "AuditResult",
    "RateResult",
    "ImpactResult",
    "Certificate",
    "TailFit",
    "ReportResult",
    "DemoResult",
)
_PUBLIC = {
    **{name: "premiumlab.api" for name in _COMMANDS},
    **{name: "premiumlab.results" for name in _RESULTS},
    "ValidationReport": "premiumlab.book.validate",
    "Run": "premiumlab.runs.rundir",
    "open_run": "premiumlab.runs.rundir",
    "load_spec": "premiumlab.book.spec",
    "load_book": "premiumlab.book.scan",
}


def __getattr__(name: str):
    if name in _PUBLIC:
        value = getattr(_import_module(_PUBLIC[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'premiumlab' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_PUBLIC))


__all__ = sorted(_PUBLIC)
