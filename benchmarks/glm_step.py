"""Benchmark: the whole GLM step of `fit` (frequency, severity, pure premium, predictions, model
files) on a book, with the Tweedie power chosen by the profile ("auto") and at a fixed power.

Run by hand: ``python benchmarks/glm_step.py BOOK.parquet [--spec SPEC] [--repeats N]``; make the
book with ``premiumlab simulate scenarios/motor.toml --policies 1000000 --out BOOK.parquet``. The
two settings alternate (auto, fixed, auto, fixed, ...) so that a shared machine's load falls on
both alike; each figure is run.json's ``timings.glm_seconds``.
"""

from __future__ import annotations

import argparse
import json
import tempfile
import tomllib
from pathlib import Path

import premiumlab

MOTOR_SPEC = Path(premiumlab.__file__).parent.parent / "scenarios" / "motor_spec.toml"


def spec_with_power(spec: Path, power: str | float, folder: Path) -> Path:
    """A copy of `spec` in `folder` with ``[glm] tweedie_power = power`` (TOML written by hand: the
    spec's tables hold only strings, numbers, booleans and arrays of them)."""
    data = tomllib.loads(spec.read_text())
    data.setdefault("glm", {})["tweedie_power"] = power
    path = folder / f"spec_{power}.toml"
    path.write_text(_toml(data))
    return path


def _toml(data: dict, prefix: str = "") -> str:
    scalars = [f"{key} = {json.dumps(value)}" for key, value in data.items() if not isinstance(value, dict)]
    tables = [_toml(value, f"{prefix}{key}.") for key, value in data.items() if isinstance(value, dict)]
    head = f"[{prefix[:-1]}]\n" if prefix and scalars else ""
    return head + "".join(line + "\n" for line in scalars) + "\n" + "".join(tables)


def glm_step(book: Path, spec: Path, out: Path) -> dict:
    """Fit the GLMs of `book` under `spec` into `out`; the step's seconds and the power it chose.

    Returns
    -------
    dict
        ``seconds`` (run.json's glm_seconds), ``power``, ``power_interval`` (or None) and the
        number of powers the profile tried.
    """
    premiumlab.fit(book, spec=spec, out=out, models="glm", force=True)
    timings = json.loads((out / "run.json").read_text())["timings"]
    model = json.loads((out / "models" / "glm_pure_premium.json").read_text())
    return {
        "seconds": timings["glm_seconds"],
        "power": model["power"],
        "power_interval": model.get("power_interval"),
        "profile_points": len(model["power_profile"]),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("book", type=Path)
    parser.add_argument("--spec", type=Path, default=MOTOR_SPEC)
    parser.add_argument("--fixed-power", type=float, default=1.5)
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        specs = {
            "auto": spec_with_power(args.spec, "auto", Path(folder)),
            "fixed": spec_with_power(args.spec, args.fixed_power, Path(folder)),
        }
        for repeat in range(args.repeats):
            figures = {name: glm_step(args.book, spec, Path(folder) / f"run_{name}") for name, spec in specs.items()}
            auto, fixed = figures["auto"], figures["fixed"]
            print(
                f"repeat {repeat + 1}: GLM step with the profile {auto['seconds']:.2f} s "
                f"(power {auto['power']}, interval {auto['power_interval']}, {auto['profile_points']} powers), "
                f"at power {args.fixed_power:g} {fixed['seconds']:.2f} s, ratio {auto['seconds'] / fixed['seconds']:.2f}",
                flush=True,
            )


if __name__ == "__main__":
    main()
