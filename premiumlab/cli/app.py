"""The `premiumlab` command line: thin commands, each calling one public function.

Imports of the numeric stack happen inside the commands so that `premiumlab --help` starts fast.
Exit codes: 0 done; 1 a check found violations (`validate`, `audit`); 2 bad input or usage.
"""
from __future__ import annotations

import functools
import os
import sys
from pathlib import Path
from typing import Annotated, Callable, Optional

import typer
from typer.core import TyperGroup

# Arrow's jemalloc pool hands freed chunks back to the system promptly, so the peak of a chunked pass
# stays near one chunk whatever the book's length (5,000,000 rows against 1,000,000: validate 1.05x,
# rate 1.12x, steady from run to run; with the default pool the peaks moved by up to 100 MB between
# runs and validate reached 1.15x). Read when pyarrow first loads, which the
# commands do lazily, after this line; a pool chosen in the environment is kept. Arrow's Windows
# builds have no jemalloc.
if sys.platform != "win32":
    os.environ.setdefault("ARROW_DEFAULT_MEMORY_POOL", "jemalloc")


class _OneLineUsage(TyperGroup):
    """Usage errors (a missing or unknown option, a value of the wrong type, an unknown command) as
    one line on stderr with exit code 2, like every other bad input; help is printed as before."""

    def main(self, *args, **kwargs):
        try:
            code = super().main(*args, **{**kwargs, "standalone_mode": False})
        except Exception as e:  # the command-line parser's errors carry exit_code and format_message
            if not (hasattr(e, "exit_code") and hasattr(e, "format_message")):
                raise
            if type(e).__name__ != "NoArgsIsHelpError":  # that one has printed the help already
                ctx = getattr(e, "ctx", None)
                where = " ".join(ctx.command_path.split()[1:]) if ctx is not None else ""
                typer.echo(f"premiumlab: {where + ': ' if where else ''}{' '.join(e.format_message().split())}",
                           err=True)
            sys.exit(e.exit_code)
        sys.exit(code if isinstance(code, int) else 0)


app = typer.Typer(cls=_OneLineUsage, add_completion=False, no_args_is_help=True, pretty_exceptions_enable=False,
                  help="premiumlab: GLM baselines, boosted trees and banded rating tables for insurance "
                       "pricing. Every output is a draft for a qualified actuary and must be filed and "
                       "approved under local rate regulation.")

Force = Annotated[bool, typer.Option("--force", help="Replace an existing output.")]
Cluster = Annotated[Optional[str], typer.Option(
    "--cluster", help="Run the heavy part on Dask (fit: the boosted-model search; validate: the "
                      "Parquet slices): local:N (N worker processes here) or a scheduler address such "
                      "as tcp://host:8786. Needs the dask extra.")]


def _fail(message: str, code: int = 2) -> None:
    typer.echo(f"premiumlab: {' '.join(message.split())}", err=True)
    raise typer.Exit(code)


def handled(fn: Callable) -> Callable:
    """Turn bad-input errors into one line on stderr and exit code 2 (1 for failed checks)."""
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        from premiumlab._core.errors import CheckFailed, InputError
        try:
            result = fn(*args, **kwargs)
            sys.stdout.flush()  # a reader that has gone away (`| head`) is met here, not at exit
            return result
        except BrokenPipeError:
            # the reader of stdout stopped early: say nothing more and exit as a tool ended by SIGPIPE
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
            raise typer.Exit(128 + 13)
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
    from premiumlab._core.outputs import atomic_files
    from premiumlab.simulation.simulator import simulate as simulate_book
    with atomic_files([out, out.parent / "truth.json"], force=force, inputs=(scenario,)) as tmp:
        summary = simulate_book(scenario, tmp / out.name, policies=policies, seed=seed)
    typer.echo(f"wrote {out} ({summary['rows']} rows, {summary['policies']} policies) and "
               f"{out.parent / 'truth.json'}")


@app.command()
@handled
def validate(book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
             spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")],
             cluster: Cluster = None) -> None:
    """Check a book against a spec, list every finding and print a profile (exit 1 on errors)."""
    from premiumlab.book.validate import validate_book
    report = validate_book(book, spec, cluster=cluster)
    typer.echo(report.text())
    if report.errors:
        raise typer.Exit(1)


@app.command()
@handled
def fit(book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
        spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")],
        out: Annotated[Path, typer.Option("--out", help="Run directory to write.")],
        models: Annotated[str, typer.Option(help="Model kinds, comma separated: glm, gbm.")] = "glm,gbm",
        cluster: Cluster = None, force: Force = False) -> None:
    """Fit GLM baselines and boosted models on the training part; write the run directory."""
    from premiumlab.runs.fit import fit as fit_run
    run = fit_run(book, spec, out, models=models, force=force, progress=sys.stderr.isatty(), cluster=cluster)
    typer.echo(f"wrote {run}")


@app.command()
@handled
def compare(run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")]) -> None:
    """Compare GLM and GBM on the holdout; write comparison.json and figures/."""
    from premiumlab.review.comparison import compare as compare_run, summary_lines
    result = compare_run(run)
    typer.echo("\n".join(summary_lines(result)))
    _echo_cautions(result["cautions"])


@app.command()
@handled
def tabulate(run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")],
             out: Annotated[Path, typer.Option("--out", help="Rating table folder to write.")],
             model: Annotated[str, typer.Option(help="gbm (distil the boosted model) or glm (export the "
                                                     "Tweedie GLM's relativities).")] = "gbm",
             book: Annotated[Optional[Path], typer.Option(help="The run's book, if it has moved.")] = None,
             force: Force = False) -> None:
    """Distil a run's model into a banded multiplicative rating table, with its fidelity."""
    from premiumlab.apply.glue import fidelity_lines
    from premiumlab.tabulation.from_run import tabulate as tabulate_run
    summary = tabulate_run(run, out, model=model, force=force, book=book)
    typer.echo("\n".join(fidelity_lines(summary)))
    _echo_cautions(summary["cautions"])


@app.command()
@handled
def audit(table: Annotated[Path, typer.Argument(help="Rating table folder.")],
          spec: Annotated[Optional[Path], typer.Option("--spec", help="Spec whose promises to check.")] = None,
          run: Annotated[Optional[Path], typer.Option("--run", help="Run whose boosted models to "
                                                                     "re-certify.")] = None) -> None:
    """Check promised directions, bands, relativities and base levels (exit 1 on any violation)."""
    from premiumlab.apply.glue import audit_table
    found = audit_table(table, spec, run)
    from premiumlab._core.cautions import DRAFT
    for line in found:
        typer.echo(line)
    typer.echo(f"audit: {len(found)} violation(s) in {table}")
    _echo_cautions([DRAFT])  # a clean audit is not an approval
    if found:
        raise typer.Exit(1)


@app.command()
@handled
def rate(table: Annotated[Path, typer.Argument(help="Rating table folder.")],
         book: Annotated[Path, typer.Argument(help="Book to rate (.csv, .parquet or a folder of parts).")],
         out: Annotated[Path, typer.Option("--out", help="Priced file to write (.csv or .parquet).")],
         exposure: Annotated[str, typer.Option(help="The book's exposure column.")] = "exposure",
         annual: Annotated[bool, typer.Option("--annual", help="Price one full term per policy.")] = False,
         force: Force = False) -> None:
    """Rate policies with a table: pure and gross premium and the build-up columns."""
    from premiumlab.apply.glue import rate_book
    cautions = rate_book(table, book, out, exposure, annual, force=force)
    typer.echo(f"wrote {out}")
    _echo_cautions(list(cautions))


@app.command()
@handled
def impact(book: Annotated[Path, typer.Argument(help="Book of policies (no claim columns needed).")],
           current: Annotated[str, typer.Option("--current", help="Current table folder, or column:NAME.")],
           proposed: Annotated[Path, typer.Option("--proposed", help="Proposed table folder.")],
           cap: Annotated[Optional[float], typer.Option(help="Cap each policy's change at +-CAP "
                                                            "(0.15 = 15 %).")] = None,
           exposure: Annotated[str, typer.Option(help="The book's exposure column.")] = "exposure",
           annual: Annotated[bool, typer.Option("--annual", help="Compare one full term per policy.")] = False,
           thresholds: Annotated[str, typer.Option(help="Increases to count, comma separated "
                                                        "(0.1 = 10 %).")] = "0.05,0.10,0.25",
           out: Annotated[Optional[Path], typer.Option("--out", help="Also write the summary as JSON.")] = None,
           figure: Annotated[Optional[Path], typer.Option("--figure", help="Also write the dislocation "
                                                                           "figure (.png).")] = None,
           force: Force = False) -> None:
    """Premium dislocation from the current to the proposed rates, optionally capped."""
    from premiumlab.apply.glue import dislocation, impact_lines, parse_thresholds, write_impact
    result = dislocation(current, str(proposed), book, exposure, annual, cap, parse_thresholds(thresholds))
    write_impact(result, out, figure, force, inputs=(book, proposed, current))
    typer.echo("\n".join(impact_lines(result)))
    _echo_cautions(result["cautions"])


@app.command()
@handled
def certify(model: Annotated[Path, typer.Argument(help="A LightGBM model in text format.")],
            factor: Annotated[str, typer.Option("--factor", help="Feature name (or index) promised monotone.")],
            direction: Annotated[str, typer.Option("--direction", help="increasing or decreasing.")]) -> None:
    """Certify from the model file alone that the raw score is monotone in a factor (exit 1 if not)."""
    from premiumlab.models.trees.certificate import certify as certify_model
    from premiumlab._core.errors import InputError
    from rating_tables.monotone import Monotone
    signs = {m.value: m.sign for m in Monotone if m.sign}
    if direction not in signs:
        raise InputError(f"--direction: '{direction}' must be increasing or decreasing")
    try:
        text = model.read_text(encoding="utf-8")
    except (FileNotFoundError, IsADirectoryError, UnicodeDecodeError):
        raise InputError(f"{model}: not a readable LightGBM text model") from None
    try:
        cert = certify_model(text, int(factor) if factor.isdigit() else factor, signs[direction])
    except InputError as e:
        raise InputError(f"{model}: {e}") from None
    typer.echo(f"{model}: {cert['trees_checked']} trees checked, {cert['trees_splitting_on_feature']} split on "
               f"{cert['feature']}, {cert['leaf_pairs_checked']} leaf pairs checked, "
               f"{cert['violation_count']} violation(s)")
    for v in cert["violations"]:
        low, high = v["leaves"]
        typer.echo(f"  tree {v['tree']}: leaf {low} (lower {cert['feature']}) has value {v['values'][0]:.6g}, "
                   f"leaf {high} (higher) has {v['values'][1]:.6g}; reversal {v['amount']:.6g}")
    from premiumlab._core.cautions import DRAFT
    _echo_cautions([DRAFT])  # a certificate is not an approval
    if cert["violation_count"]:
        raise typer.Exit(1)


@app.command()
@handled
def tails(book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
          spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")],
          threshold: Annotated[Optional[float], typer.Option(help="Threshold U (money); default: the 90th "
                                                                  "percentile of the losses.")] = None,
          as_json: Annotated[bool, typer.Option("--json", help="Print the fit as JSON (threshold, exceedances, "
                                                               "shape, scale, ...).")] = False,
          figure: Annotated[Optional[Path], typer.Option("--figure", help="Also write the mean-excess and tail "
                                                                          "figure (.png).")] = None,
          force: Force = False) -> None:
    """Large-loss threshold aid: mean excess by threshold and a generalised Pareto fit above U."""
    from premiumlab.experience.tails import tail_lines, threshold_aid
    result = threshold_aid(book, spec, threshold, figure=figure, force=force)
    if as_json:
        import json

        from premiumlab._core.jsonio import plain
        typer.echo(json.dumps(plain({k: v for k, v in result.items() if k != "cautions"}), allow_nan=False))
    else:
        typer.echo("\n".join(tail_lines(result)))
    _echo_cautions(result["cautions"])


@app.command()
@handled
def report(run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")]) -> None:
    """Write RUN/report.html: one file with the comparison, figures, GLM tables and cautions."""
    from premiumlab.review.report import write_report
    typer.echo(f"wrote {write_report(run)}")


@app.command()
@handled
def demo(out: Annotated[Path, typer.Option("--out", help="Folder for the demo outputs.")] = Path("demo-output"),
         policies: Annotated[Optional[int], typer.Option(help="Policies in the demo book.")] = None,
         cluster: Cluster = None, force: Force = False) -> None:
    """Run the whole job on the built-in motor scenario."""
    from premiumlab.demo_job import run_demo
    run_demo(out, policies=policies, force=force, echo=typer.echo, cluster=cluster)


def main() -> None:  # pragma: no cover - console entry point
    app()
