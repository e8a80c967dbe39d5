"""The `premiumlab` command line: thin commands, each calling its function of `premiumlab.api` and
printing the result's text (`premiumlab.cli.format`).

Imports of the numeric stack happen inside the commands so that `premiumlab --help` starts fast.
Exit codes: 0 done; 1 a check found violations (`validate`, `audit`, `certify`); 2 bad input or usage.
"""

from __future__ import annotations

import functools
import os
import sys
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Annotated

import typer

from premiumlab._core.defaults import PLAUSIBLE_RELATIVITY
from premiumlab.cli.console import StepReporter, is_quiet, note, print_view, say, set_quiet, warn
from premiumlab.cli.help import NamedParamsCommand, NamedParamsGroup


class _OneLineUsage(NamedParamsGroup):
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
                typer.echo(
                    f"premiumlab: {where + ': ' if where else ''}{' '.join(e.format_message().split())}", err=True
                )
            sys.exit(e.exit_code)
        sys.exit(code if isinstance(code, int) else 0)


app = typer.Typer(
    cls=_OneLineUsage,
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="premiumlab: GLM baselines, boosted trees and banded rating tables for insurance "
    "pricing. Every output is a draft for a qualified actuary and must be filed and "
    "approved under local rate regulation.",
)


def _print_version(value: bool) -> None:
    if value:
        from premiumlab import __version__

        typer.echo(f"premiumlab {__version__}")
        raise typer.Exit(0)


@app.callback()
def _before_any_command(
    quiet: Annotated[
        bool,
        typer.Option(
            "--quiet", "-q", help="Print only errors, warnings and cautions (on stderr); outputs are still written."
        ),
    ] = False,
    version: Annotated[
        bool,
        typer.Option("--version", help="Print the version and exit.", callback=_print_version, is_eager=True),
    ] = False,
) -> None:
    set_quiet(quiet)
    # Arrow's jemalloc pool hands freed chunks back to the system promptly, so the peak of a chunked
    # pass stays near one chunk whatever the book's length (5,000,000 rows against 1,000,000: validate
    # 1.05x, rate 1.12x, steady from run to run; with the default pool the peaks moved by up to 100 MB
    # between runs and validate reached 1.15x). Read when pyarrow first loads, which the commands do
    # lazily, after this callback; a pool chosen in the environment is kept. Arrow's Windows builds
    # have no jemalloc.
    if sys.platform != "win32":
        os.environ.setdefault("ARROW_DEFAULT_MEMORY_POOL", "jemalloc")


Force = Annotated[bool, typer.Option("--force", help="Replace an existing output.")]
Cluster = Annotated[
    str | None,
    typer.Option(
        "--cluster",
        help="Run the heavy part on Dask (fit: the boosted-model search and the GLMs' passes over "
        "the rows; validate: the Parquet slices; rate: the parts of a Parquet dataset, into a "
        "folder of parts; impact: the rating of a Parquet dataset's parts): local:N (N worker processes here) or a scheduler address such "
        "as tcp://host:8786. Needs the dask extra.",
    ),
]


Bounds = Annotated[
    tuple[float, float],
    typer.Option(
        "--bounds",
        metavar="LOW HIGH",
        help="Plausibility bounds of a relativity (default 0.2 5, a common-practice default, not a rule).",
    ),
]


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
            raise typer.Exit(128 + 13) from None
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


def _echo_cautions(cautions: Iterable[str]) -> None:
    from premiumlab.cli.format import caution_lines

    warn(caution_lines(cautions))


@app.command(cls=NamedParamsCommand)
@handled
def simulate(
    scenario: Annotated[Path, typer.Argument(help="Scenario TOML file.")],
    out: Annotated[Path, typer.Option("--out", help="Book to write (.csv or .parquet).")],
    policies: Annotated[int | None, typer.Option(help="Number of policies.")] = None,
    seed: Annotated[int | None, typer.Option(help="Random seed.")] = None,
    force: Force = False,
) -> None:
    """Write a synthetic book from an invented scenario, with truth.json beside it."""
    from premiumlab import api
    from premiumlab.cli.format import simulation_line

    say(simulation_line(api.simulate(scenario, out=out, policies=policies, seed=seed, force=force)))


@app.command(cls=NamedParamsCommand)
@handled
def validate(
    book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
    spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")],
    cluster: Cluster = None,
) -> None:
    """Check a book against a spec, list every finding and print a profile (exit 1 on errors)."""
    from premiumlab import api
    from premiumlab.cli.format import validation_view

    report = api.validate(book, spec=spec, cluster=cluster)
    print_view(validation_view(report))
    if is_quiet():
        warn(str(finding) for finding in report.errors)
    _echo_cautions(report.cautions)
    if report.errors:
        raise typer.Exit(1)


@app.command(cls=NamedParamsCommand)
@handled
def fit(
    book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
    spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")],
    out: Annotated[Path, typer.Option("--out", help="Run directory to write.")],
    models: Annotated[str, typer.Option(help="Model kinds, comma separated: glm, gbm.")] = "glm,gbm",
    cluster: Cluster = None,
    force: Force = False,
) -> None:
    """Fit GLM baselines and boosted models on the training part; write the run directory."""
    from premiumlab import api
    from premiumlab.cli.format import diagnostic_lines

    with StepReporter(err=True, first="fit: reading the book") as steps:
        run = api.fit(book, spec=spec, out=out, models=models, cluster=cluster, force=force, progress=steps)
    say(f"wrote {run.path}")
    if run.files.interactions.is_file():
        from premiumlab._core.jsonio import read_json
        from premiumlab.cli.format import interaction_line

        note(interaction_line(read_json(run.files.interactions)))
    warn(diagnostic_lines(run.manifest.get("diagnostics", []), source=run.files.manifest))


@app.command(cls=NamedParamsCommand)
@handled
def compare(
    run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")],
    bounds: Bounds = PLAUSIBLE_RELATIVITY,
    out: Annotated[
        Path | None,
        typer.Option("--out", help="A new folder for comparison.json and figures/ (default: inside the run)."),
    ] = None,
    force: Force = False,
) -> None:
    """Compare GLM and GBM on the holdout; write comparison.json and figures/; warn of broken models."""
    from premiumlab import api
    from premiumlab.cli.format import comparison_view, diagnostic_lines

    result = api.compare(run, bounds=bounds, out=out, force=force)
    print_view(comparison_view(result))
    warn(diagnostic_lines(result.diagnostics, source=(run if out is None else out) / "comparison.json"))
    _echo_cautions(result.cautions)


@app.command(cls=NamedParamsCommand)
@handled
def tabulate(
    run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")],
    out: Annotated[Path, typer.Option("--out", help="Rating table folder to write.")],
    model: Annotated[
        str,
        typer.Option(
            help="auto (the best on the holdout), gbm (boosted Tweedie), gbm_freq_sev (boosted frequency x "
            "severity), glm (the Tweedie GLM's relativities) or glm_freq_sev (frequency x severity GLMs')."
        ),
    ] = "auto",
    book: Annotated[Path | None, typer.Option(help="The run's book, if it has moved.")] = None,
    force: Force = False,
) -> None:
    """Distil a run's model into a banded multiplicative rating table, with its fidelity."""
    from premiumlab import api
    from premiumlab.cli.format import fidelity_view

    result = api.tabulate(run, out=out, model=model, book=book, force=force)
    print_view(fidelity_view(result))
    _echo_cautions(result.cautions)


@app.command(cls=NamedParamsCommand)
@handled
def select(
    table: Annotated[Path, typer.Argument(help="The indicated table folder (written by `tabulate`).")],
    selections: Annotated[Path, typer.Option("--selections", help="The selections file (TOML).")],
    run: Annotated[Path, typer.Option("--run", help="The run the table was made from.")],
    out: Annotated[Path, typer.Option("--out", help="Selected table folder to write.")],
    current: Annotated[
        Path | None, typer.Option("--current", help="The table in force, to cap against or keep.")
    ] = None,
    book: Annotated[Path | None, typer.Option(help="The run's book, if it has moved.")] = None,
    force: Force = False,
) -> None:
    """Apply an actuary's selections to an indicated table, each with its reason and off-balance."""
    from premiumlab import api
    from premiumlab.cli.format import selection_lines

    result = api.select(table, selections=selections, run=run, out=out, current=current, book=book, force=force)
    say("\n".join(selection_lines(result)))
    _echo_cautions(result.cautions)


@app.command(cls=NamedParamsCommand)
@handled
def audit(
    table: Annotated[Path, typer.Argument(help="Rating table folder.")],
    spec: Annotated[Path | None, typer.Option("--spec", help="Spec whose promises to check.")] = None,
    run: Annotated[Path | None, typer.Option("--run", help="Run whose boosted models to re-certify.")] = None,
    bounds: Bounds = PLAUSIBLE_RELATIVITY,
    no_bounds: Annotated[bool, typer.Option("--no-bounds", help="Check no plausibility bounds.")] = False,
) -> None:
    """Check promised directions, bands, relativity bounds and base levels (exit 1 on any violation)."""
    from premiumlab import api
    from premiumlab.cli.format import audit_lines, diagnostic_lines

    result = api.audit(table, spec=spec, run=run, bounds=bounds, no_bounds=no_bounds)
    promises = None
    if spec is not None:
        from premiumlab import load_spec

        promises = {
            f.name: "increasing" if f.direction > 0 else "decreasing" for f in load_spec(spec).factors if f.direction
        }
    say("\n".join(audit_lines(result, promises=promises, certificate_checked=run is not None)))
    warn(diagnostic_lines(result.diagnostics))  # warnings, not violations
    _echo_cautions(result.cautions)  # a clean audit is not an approval
    if result.violations:
        raise typer.Exit(1)


@app.command(cls=NamedParamsCommand)
@handled
def rate(
    table: Annotated[Path, typer.Argument(help="Rating table folder.")],
    book: Annotated[Path, typer.Argument(help="Book to rate (.csv, .parquet or a folder of parts).")],
    out: Annotated[Path, typer.Option("--out", help="Priced file to write (.csv or .parquet).")],
    exposure: Annotated[
        str | None, typer.Option(help="The book's exposure column (default: the table's, else 'exposure').")
    ] = None,
    annual: Annotated[bool, typer.Option("--annual", help="Price one full term per policy.")] = False,
    strict_levels: Annotated[
        bool,
        typer.Option("--strict-levels", help="Refuse a level the table does not list, even with a fallback."),
    ] = False,
    force: Force = False,
    cluster: Cluster = None,
) -> None:
    """Rate policies with a table: pure and gross premium and the build-up columns."""
    from premiumlab import api
    from premiumlab.cli.format import level_count_lines
    from premiumlab.cli.tables import rate_summary_table

    result = api.rate(
        table,
        book,
        out=out,
        exposure=exposure,
        annual=annual,
        strict_levels=strict_levels,
        force=force,
        cluster=cluster,
    )
    say(f"wrote {result.priced} ({result.rows} rows)")
    gross, at_minimum = _priced_totals(result.priced)
    fallback = sum(c.fallback_rows + c.missing_rows for c in result.counts)
    print_view([rate_summary_table(result.rows, gross, at_minimum, fallback)])
    warn(level_count_lines(result.counts))
    _echo_cautions(result.cautions)


def _priced_totals(priced: Path) -> tuple[float, int | None]:
    """The total gross premium of a priced file and its rows at the minimum premium (None without
    an `at_minimum` column), read from those two columns only."""
    import pandas as pd

    wanted = ("gross_premium", "at_minimum")
    if priced.is_dir() or priced.suffix.lower() in (".parquet", ".pq"):  # a folder of parts with --cluster
        import pyarrow.dataset as ds

        data = ds.dataset(priced, format="parquet")
        frame = data.to_table(columns=[c for c in wanted if c in data.schema.names]).to_pandas()
    else:
        frame = pd.read_csv(priced, usecols=lambda c: c in wanted)
    at_minimum = int(frame["at_minimum"].astype(str).str.lower().eq("true").sum()) if "at_minimum" in frame else None
    return float(frame["gross_premium"].sum()), at_minimum


@app.command(cls=NamedParamsCommand)
@handled
def impact(
    book: Annotated[Path, typer.Argument(help="Book of policies (no claim columns needed).")],
    current: Annotated[str, typer.Option("--current", help="Current table folder, or column:NAME.")],
    proposed: Annotated[Path, typer.Option("--proposed", help="Proposed table folder.")],
    cap: Annotated[float | None, typer.Option(help="Cap each policy's change at +-CAP (0.15 = 15 %).")] = None,
    exposure: Annotated[
        str | None, typer.Option(help="The book's exposure column (default: the table's, else 'exposure').")
    ] = None,
    policy_id: Annotated[
        str | None, typer.Option("--policy-id", help="The book's policy id column (default: the table's).")
    ] = None,
    period: Annotated[str | None, typer.Option(help="The book's period column (default: the table's).")] = None,
    annual: Annotated[bool, typer.Option("--annual", help="Compare one full term per policy.")] = False,
    thresholds: Annotated[
        str, typer.Option(help="Increases to count, comma separated (0.1 = 10 %).")
    ] = "0.05,0.10,0.25",
    out: Annotated[Path | None, typer.Option("--out", help="Also write the summary as JSON.")] = None,
    figure: Annotated[Path | None, typer.Option("--figure", help="Also write the dislocation figure (.png).")] = None,
    force: Force = False,
    cluster: Cluster = None,
) -> None:
    """Premium dislocation from the current to the proposed rates, optionally capped."""
    from premiumlab import api
    from premiumlab.cli.format import impact_view

    result = api.impact(
        book,
        current=current,
        proposed=proposed,
        cap=cap,
        exposure=exposure,
        policy_id=policy_id,
        period=period,
        annual=annual,
        thresholds=thresholds,
        out=out,
        figure=figure,
        force=force,
        cluster=cluster,
    )
    print_view(impact_view(result))
    _echo_cautions(result.cautions)


@app.command(cls=NamedParamsCommand)
@handled
def certify(
    model: Annotated[Path, typer.Argument(help="A LightGBM model in text format.")],
    factor: Annotated[str, typer.Option("--factor", help="Feature name (or index) promised monotone.")],
    direction: Annotated[str, typer.Option("--direction", help="increasing or decreasing.")],
) -> None:
    """Certify from the model file alone that the raw score is monotone in a factor (exit 1 if not)."""
    from premiumlab import api
    from premiumlab.cli.format import certificate_lines

    result = api.certify(model, factor=factor, direction=direction)
    say("\n".join(certificate_lines(result)))
    _echo_cautions(result.cautions)  # a certificate is not an approval
    if result.violation_count:
        raise typer.Exit(1)


@app.command(cls=NamedParamsCommand)
@handled
def tails(
    book: Annotated[Path, typer.Argument(help="Book (.csv, .parquet or a folder of parts).")],
    spec: Annotated[Path, typer.Option("--spec", help="Pricing spec TOML.")],
    threshold: Annotated[
        float | None, typer.Option(help="Threshold U (money); default: the 90th percentile of the losses.")
    ] = None,
    as_json: Annotated[
        bool, typer.Option("--json", help="Print the fit as JSON (threshold, exceedances, shape, scale, ...).")
    ] = False,
    figure: Annotated[
        Path | None, typer.Option("--figure", help="Also write the mean-excess and tail figure (.png).")
    ] = None,
    force: Force = False,
) -> None:
    """Large-loss threshold aid: mean excess by threshold and a generalised Pareto fit above U."""
    from premiumlab import api
    from premiumlab.cli.format import tail_json, tail_view

    result = api.tails(book, spec=spec, threshold=threshold, figure=figure, force=force)
    if as_json:
        say(tail_json(result))
    else:
        print_view(tail_view(result))
    _echo_cautions(result.cautions)


@app.command(cls=NamedParamsCommand)
@handled
def report(
    run: Annotated[Path, typer.Argument(help="Run directory written by `fit`.")],
    table: Annotated[Path | None, typer.Option("--table", help="A rating table made from the run.")] = None,
    current: Annotated[Path | None, typer.Option("--current", help="The current rating table.")] = None,
    book: Annotated[Path | None, typer.Option("--book", help="A book for the impact section.")] = None,
    tails: Annotated[
        Path | None, typer.Option("--tails", help="The output of `tails --json`, saved to a file.")
    ] = None,
    out: Annotated[Path | None, typer.Option("--out", help="HTML file to write (default RUN/report.html).")] = None,
    force: Force = False,
) -> None:
    """Write one self-contained HTML report reviewing a run and its rating table."""
    from premiumlab import api

    say(f"wrote {api.report(run, table=table, current=current, book=book, tails=tails, out=out, force=force).report}")


@app.command(cls=NamedParamsCommand)
@handled
def demo(
    out: Annotated[Path, typer.Option("--out", help="Folder for the demo outputs.")] = Path("demo-output"),
    policies: Annotated[int | None, typer.Option(help="Policies in the demo book.")] = None,
    cluster: Cluster = None,
    force: Force = False,
) -> None:
    """Run the whole job on the built-in motor scenario."""
    from premiumlab import api
    from premiumlab.cli.format import demo_summary_lines

    with StepReporter(err=False, first="demo: simulating the book") as steps:
        result = api.demo(out=out, policies=policies, cluster=cluster, force=force, progress=steps)
    _echo_cautions(result.cautions)
    say("\n".join(demo_summary_lines(result, steps.steps)))
