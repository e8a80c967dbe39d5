"""`demo`: the whole job on the built-in motor scenario, into one folder."""
from __future__ import annotations

from importlib import resources
from pathlib import Path
from typing import Callable

from premiumlab.outputs import check_target

SCENARIO = "motor"


def scenario_file(name: str) -> Path:
    """Path of a shipped scenario file, e.g. scenario_file("motor.toml")."""
    return Path(str(resources.files("premiumlab.scenarios").joinpath(name)))


def run_demo(out: str | Path, policies: int | None = None, force: bool = False,
             echo: Callable[[str], None] = print) -> Path:
    """Simulate the motor book, then fit, and write everything under `out`."""
    from premiumlab.outputs import atomic_output
    from premiumlab.pipeline import fit
    from premiumlab.simulate import simulate

    out = Path(out)
    check_target(out, force)
    with atomic_output(out, force=force) as tmp:
        book = tmp / "book.parquet"
        spec = scenario_file(f"{SCENARIO}_spec.toml")
        simulate(scenario_file(f"{SCENARIO}.toml"), book, policies=policies)
        echo(f"simulated {book.name}")
        (tmp / "spec.toml").write_bytes(spec.read_bytes())
        fit(book, tmp / "spec.toml", tmp / "run", progress=True)
        echo("fitted run/")
    echo(f"demo written to {out}")
    return out
