"""The `premiumlab` command line: thin commands, each calling one public function.

Imports of the numeric stack happen inside the commands so that `premiumlab --help` starts fast.
Exit codes: 0 done; 1 a check found violations (`validate`, `audit`); 2 bad input or usage.
"""
from __future__ import annotations

import functools
import sys
from pathlib import Path
from typing import Annotated, Callable, Optional

import typer

app = typer.Typer(add_completion=False, no_args_is_help=True, pretty_exceptions_enable=False,
                  help="premiumlab: GLM baselines, boosted trees and banded rating tables for insurance "
                       "pricing. Every output is a draft for a qualified actuary and must be filed and "
                       "approved under local rate regulation.")

Force = Annotated[bool, typer.Option("--force", help="Replace an existing output.")]


def _fail(message: str, code: int = 2) -> None:
    typer.echo(f"premiumlab: {' '.join(message.split())}", err=True)
    raise typer.Exit(code)


def handled(fn: Callable) -> Callable:
    """Turn bad-input errors into one line on stderr and exit code 2 (1 for failed checks)."""
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        from premiumlab.errors import CheckFailed, InputError
        try:
            return fn(*args, **kwargs)
        except InputError as e:
            _fail(str(e))
        except CheckFailed as e:
            _fail(str(e), code=1)
        except OSError as e:
            where = e.filename or ""
            _fail(f"{where}: {e.strerror or e}" if where else str(e))
        except ValueError as e:
            from rating_tables.errors import TableError
            if isinstance(e, TableError):
                _fail(str(e))
            raise
    return wrapper


def _echo_cautions(cautions: list[str]) -> None:
    for c in cautions:
        typer.echo(f"caution: {c}", err=True)


@app.command()
@handled
def simulate(scenario: Annotated[Path, typer.Argument(help="Scenario TOML file.")],
             out: Annotated[Path, typer.Option("--out", help="Book to write (.csv or .parquet).")],
             policies: Annotated[Optional[int], typer.Option(help="Number of policies.")] = None,
             seed: Annotated[Optional[int], typer.Option(help="Random seed.")] = None,
             force: Force = False) -> None:
    """Write a synthetic book from an invented scenario, with truth.json beside it."""
    from premiumlab.outputs import atomic_files
    from premiumlab.simulate import simulate as simulate_book
    with atomic_files([out, out.parent / "truth.json"], force=force) as tmp:
        summary = simulate_book(scenario, tmp / out.name, policies=policies, seed=seed)
    typer.echo(f"wrote {out} ({summary['rows']} rows, {summary['policies']} policies) and "
               f"{out.parent / 'truth.json'}")


@app.command()
@handled
def validate(book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
             spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")]) -> None:
    """Check a book against a spec, list every finding and print a profile (exit 1 on errors)."""
    from premiumlab.validation import validate_book
    report = validate_book(book, spec)
    typer.echo(report.text())
    if report.errors:
        raise typer.Exit(1)


@app.command()
@handled
def fit(book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
        spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")],
        out: Annotated[Path, typer.Option("--out", help="Run directory to write.")],
        models: Annotated[str, typer.Option(help="Model kinds, comma separated: glm, gbm.")] = "glm,gbm",
        force: Force = False) -> None:
    """Fit GLM baselines and boosted models on the training part; write the run directory."""
    from premiumlab.pipeline import fit as fit_run
    run = fit_run(book, spec, out, models=models, force=force, progress=sys.stderr.isatty())
    typer.echo(f"wrote {run}")


@app.command()
@handled
def compare(run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")]) -> None:
    """Compare GLM and GBM on the holdout; write comparison.json and figures/."""
    from premiumlab.comparison import compare as compare_run, summary_lines
    result = compare_run(run)
    typer.echo("\n".join(summary_lines(result)))
    _echo_cautions(result["cautions"])


@app.command()
@handled
def report(run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")]) -> None:
    """Write RUN/report.html: one file with the comparison, figures, GLM tables and cautions."""
    from premiumlab.report import write_report
    typer.echo(f"wrote {write_report(run)}")


@app.command()
@handled
def demo(out: Annotated[Path, typer.Option("--out", help="Folder for the demo outputs.")] = Path("demo-output"),
         policies: Annotated[Optional[int], typer.Option(help="Policies in the demo book.")] = None,
         force: Force = False) -> None:
    """Run the whole job on the built-in motor scenario."""
    from premiumlab.demo import run_demo
    run_demo(out, policies=policies, force=force, echo=typer.echo)


def main() -> None:  # pragma: no cover - console entry point
    app()
