"""All benchmarks in one run: one table of ratios, each pair measured side by side, with peak memory.

Run by hand: ``python benchmarks/run_all.py [--policies N] [--repeats R]`` (needs the ``bench``
extra: ``pip install -e '.[bench]'`` for glum). Invented books, seeded. Every measurement runs in its
own child process (``--measure NAME``); its figure is the median of R calls of the measured work, and
its peak memory the child's peak resident set (getrusage ru_maxrss), book building included. The
pairs alternate (ours, theirs, ours, theirs, ...) so that a shared machine's load falls on both.

GLM: `glm_fit.invented_book` (six banded factors; Poisson frequency, Gamma severity, Tweedie pure
premium), the three fits without penalty: premiumlab's public functions against glum
(``GeneralizedLinearRegressor``, alpha 0, categorical columns) and statsmodels (``GLM`` on the
dense one-hot design, `glm_fit.statsmodels_fit`), at power 1.5 and with the power profile. glum
runs the same profile: a fit at each power premiumlab's profile tried, each with the dispersion
maximising statsmodels' Tweedie density on the rows (scipy's bounded Brent search on log phi).
Rating: `rate_throughput`'s table (8 factors and a two-way table) on a book of N policies:
`rating_tables.rate` against LightGBM ``predict`` of `rate_throughput.fit_lightgbm`'s Tweedie model
(300 trees x 31 leaves, fitted on a 100,000-policy sample, not tuned here) and against a bare
numpy/pandas rater of the same table (`bare_rate`: band lookup by searchsorted, level codes, one
product; no checks, fallbacks or loadings).
Dask (`--cluster local:2`, two single-threaded worker processes started by the command, their
start-up included): on the motor scenario's book of N policies written as four Parquet parts,
`fit --models glm` and `validate` in one process against `local:2`; `rate` of the rating book
above, written as four Parquet parts, into one file against into a folder of parts on `local:2`.
Boosted search: `gbm_search.bare_search` (lightgbm.train on each fold's subset of one binned
Dataset, early stopping on the same deviance) against premiumlab's `cross_validate` in one
process, 2 settings x 3 folds, up to 300 rounds, one thread, on `gbm_overhead.invented_book` of N
rows; the fold deviances must be identical.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).parent))

import glm_fit
import rate_throughput

ROOT = Path(__file__).resolve().parents[1]
PARTS = 4
CLUSTER = "local:2"

FIXED_POWER = glm_fit.TWEEDIE_POWER
FAMILIES = ("poisson", "gamma", "tweedie")


def median_of(work: Callable[[], object], repeats: int) -> tuple[float, object]:
    """The median seconds of `repeats` calls of `work`, and the last call's result."""
    seconds, result = [], None
    for _ in range(repeats):
        started = time.perf_counter()
        result = work()
        seconds.append(time.perf_counter() - started)
    return statistics.median(seconds), result


# --- GLM -------------------------------------------------------------------------------------


def glm_book(policies: int):
    return glm_fit.invented_book(policies, glm_fit.BANDED_SIZES, seed=1)


def premiumlab_glms(inputs, power: str | float) -> list[float]:
    """The three fits without penalty; the powers the Tweedie profile tried (empty at a fixed power)."""
    from premiumlab.models.glm.fit import fit_frequency, fit_pure_premium, fit_severity

    fit_frequency(inputs, penalty="none")
    fit_severity(inputs, penalty="none")
    result = fit_pure_premium(inputs, power=power, penalty="none")
    return [entry["power"] for entry in result.power_profile]


def glum_fit(inputs, family: str, power: float = FIXED_POWER):
    """glum's fit of one target on the factors as categorical columns (alpha 0, log link)."""
    from glum import GeneralizedLinearRegressor, TweedieDistribution

    count, amount, exposure = inputs.claim_count, inputs.claim_amount, inputs.exposure
    factors = inputs.factors
    if family == "poisson":
        rows, y, weight, distribution = slice(None), count / exposure, exposure, "poisson"
    elif family == "gamma":
        rows = (count > 0) & (amount > 0)
        y, weight, distribution = amount[rows] / count[rows], count[rows], "gamma"
        factors = factors[rows]
    else:
        rows, y, weight, distribution = slice(None), amount / exposure, exposure, TweedieDistribution(power)
    model = GeneralizedLinearRegressor(family=distribution, link="log", alpha=0.0, drop_first=True)
    return model.fit(factors, y, sample_weight=weight)


def glum_glms(inputs, powers: list[float]) -> None:
    """glum's three fits; with `powers`, the Tweedie profile over them with the exact density."""
    import scipy.optimize
    import statsmodels.api as sm

    glum_fit(inputs, "poisson")
    glum_fit(inputs, "gamma")
    if not powers:
        glum_fit(inputs, "tweedie")
        return
    y = inputs.claim_amount / inputs.exposure
    for power in powers:
        mu = glum_fit(inputs, "tweedie", power).predict(inputs.factors)
        scipy.optimize.minimize_scalar(
            lambda log_phi, family, mu: -family.loglike(y, mu, var_weights=inputs.exposure, scale=np.exp(log_phi)),
            args=(sm.families.Tweedie(var_power=power, eql=False), mu),
            bounds=(-5.0, 10.0),
            method="bounded",
            options={"xatol": 1e-4},
        )


def statsmodels_glms(inputs) -> None:
    exog = glm_fit.dense_design(inputs)
    for family in FAMILIES:
        glm_fit.statsmodels_fit(inputs, exog, family)


# --- rating ----------------------------------------------------------------------------------


def rating_setup(policies: int):
    rng = np.random.default_rng(2027)
    table = rate_throughput.build_table(rng)
    return table, rate_throughput.build_book(rng, policies), rng


def bare_rate(table, book: pd.DataFrame, exposure: str) -> np.ndarray:
    """Pure premium per row: base rate x the product of the relativities x exposure, looked up with
    numpy (bands by searchsorted on the upper edges, levels by categorical codes)."""
    from rating_tables import Bands

    def cell(cells, values: pd.Series) -> np.ndarray:
        if isinstance(cells, Bands):
            return np.searchsorted(cells.upper, values.to_numpy(), side="right")
        return pd.Categorical(values, categories=list(cells)).codes

    product = np.full(len(book), table.base_rate)
    for factor in table.main_factors:
        cells = Bands(factor.lower, factor.upper) if hasattr(factor, "lower") else factor.levels
        product *= factor.relativity[cell(cells, book[factor.name])]
    for two_way in table.interactions:
        a, b = two_way.of
        product *= two_way.relativity[cell(two_way.a_cells, book[a]), cell(two_way.b_cells, book[b])]
    return product * book[exposure].to_numpy()


# --- Dask and the boosted search -------------------------------------------------------------


def in_parts(frame: pd.DataFrame, folder: Path) -> Path:
    """`frame` written as PARTS Parquet parts of about equal rows into `folder`."""
    folder.mkdir()
    for k, rows in enumerate(np.array_split(np.arange(len(frame)), PARTS)):
        frame.iloc[rows].to_parquet(folder / f"part-{k:02d}.parquet", index=False)
    return folder


def cluster_setup(policies: int, folder: Path) -> None:
    """The motor scenario's book and the rating book, each as PARTS Parquet parts, and the table."""
    import premiumlab
    from rating_tables import save

    premiumlab.simulate(ROOT / "scenarios" / "motor.toml", out=folder / "motor.parquet", policies=policies, seed=5)
    in_parts(pd.read_parquet(folder / "motor.parquet"), folder / "motor")
    table, book, _ = rating_setup(policies)
    save(table, folder / "table")
    in_parts(book, folder / "rating_book")


def cluster_work(name: str, folder: Path) -> Callable[[], object]:
    """The command measured as `name` (`fit_glm`, `validate` or `rate`, suffixed `_here` or `_cluster`)."""
    import premiumlab

    cluster = CLUSTER if name.endswith("_cluster") else None
    spec = ROOT / "scenarios" / "motor_spec.toml"
    if name.startswith("fit_glm"):
        return lambda: premiumlab.fit(
            folder / "motor", spec=spec, out=folder / name, models="glm", cluster=cluster, force=True
        )
    if name.startswith("validate"):
        return lambda: premiumlab.validate(folder / "motor", spec=spec, cluster=cluster)
    out = folder / (name if cluster else f"{name}.parquet")
    return lambda: premiumlab.rate(folder / "table", folder / "rating_book", out=out, cluster=cluster, force=True)


def search_work(name: str, policies: int) -> Callable[[], list[float]]:
    """The boosted search measured as `name` (`search_premiumlab` or `search_bare`)."""
    import gbm_overhead
    import gbm_search

    from premiumlab.book.gbm_options import GbmOptions
    from premiumlab.models.gbm.search import cross_validate, select_settings
    from premiumlab.models.gbm.training import prepare_training

    options = GbmOptions(folds=3, max_settings=2, num_threads=1, max_rounds=300, tweedie_power=1.5)
    data = prepare_training(gbm_overhead.invented_book(policies), "pure_premium", options)
    settings = select_settings(options)
    if name == "search_bare":
        return lambda: gbm_search.bare_search(data, settings, options)
    return lambda: [d for row in cross_validate(data, settings, options) for d in row["fold_deviances"]]


# --- children --------------------------------------------------------------------------------


def measure(name: str, policies: int, repeats: int, folder: Path) -> dict:
    """Run measurement `name` in this process: its median seconds and what it reports."""
    extra: dict = {}
    import glum  # noqa: F401  (the libraries imported before any timing)
    import lightgbm  # noqa: F401
    import statsmodels.api  # noqa: F401

    import premiumlab.models.glm.fit  # noqa: F401

    if name.startswith(("fit_glm", "validate", "rate_here", "rate_cluster")):
        seconds, _ = median_of(cluster_work(name, folder), repeats)
    elif name.startswith("search_"):
        seconds, deviances = median_of(search_work(name, policies), repeats)
        other = folder / "fold_deviances.json"
        if name == "search_premiumlab":
            other.write_text(json.dumps(deviances))
        else:
            extra["fold deviances identical"] = float(json.loads(other.read_text()) == deviances)
    elif name.startswith("glm_"):
        inputs = glm_book(policies)
        profile_file = folder / "profile_powers.json"
        if name == "glm_premiumlab_fixed":
            seconds, _ = median_of(lambda: premiumlab_glms(inputs, FIXED_POWER), repeats)
        elif name == "glm_premiumlab_profile":
            seconds, powers = median_of(lambda: premiumlab_glms(inputs, "auto"), repeats)
            profile_file.write_text(json.dumps(powers))
            extra["powers tried"] = len(powers)
        elif name == "glm_glum_fixed":
            seconds, _ = median_of(lambda: glum_glms(inputs, []), repeats)
        elif name == "glm_glum_profile":
            powers = json.loads(profile_file.read_text())
            seconds, _ = median_of(lambda: glum_glms(inputs, powers), repeats)
        else:
            seconds, _ = median_of(lambda: statsmodels_glms(inputs), repeats)
    else:
        from rating_tables import rate

        table, book, rng = rating_setup(policies)
        model_file = folder / "lightgbm.txt"
        if name == "rate_table":
            rate(table, book, "exposure")
            seconds, _ = median_of(lambda: rate(table, book, "exposure"), repeats)
            # the rated column is rounded to premium_decimals; the bare rater is compared unrounded
            from rating_tables import pure_premium

            np.save(folder / "pure_premium.npy", pure_premium(table, book, "exposure"))
        elif name == "rate_lightgbm_fit":
            model, _ = rate_throughput.fit_lightgbm(table, book, rng)
            model.save_model(str(model_file))
            seconds = 0.0
        elif name == "rate_lightgbm":
            import lightgbm as lgb

            model = lgb.Booster(model_file=str(model_file))
            features = [column for column in book.columns if column != "exposure"]
            seconds, _ = median_of(lambda: model.predict(book[features], num_threads=rate_throughput.THREADS), repeats)
        else:
            seconds, premium = median_of(lambda: bare_rate(table, book, "exposure"), repeats)
            expected = np.load(folder / "pure_premium.npy")
            extra["max relative difference from rate"] = float(np.max(np.abs(premium / expected - 1.0)))
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux
    return {"seconds": seconds, "peak_mb": peak_mb, **extra}


def child(name: str, policies: int, repeats: int, folder: Path) -> dict:
    command = [sys.executable, __file__, "--measure", name, "--policies", str(policies)]
    command += ["--repeats", str(repeats), "--folder", str(folder)]
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode:
        raise RuntimeError(f"measurement {name} failed:\n{done.stderr}")
    return json.loads(done.stdout.strip().splitlines()[-1])


PAIRS = (  # (label, ours, theirs); theirs / ours is the ratio
    ("GLM fits at power 1.5: glum / premiumlab", "glm_premiumlab_fixed", "glm_glum_fixed"),
    ("GLM fits at power 1.5: statsmodels / premiumlab", "glm_premiumlab_fixed", "glm_statsmodels_fixed"),
    ("GLM fits with the power profile: glum / premiumlab", "glm_premiumlab_profile", "glm_glum_profile"),
    ("Rating: LightGBM predict / rating_tables.rate", "rate_table", "rate_lightgbm"),
    ("Rating: bare numpy rater / rating_tables.rate", "rate_table", "rate_bare"),
    ("fit --models glm: one process / local:2", "fit_glm_cluster", "fit_glm_here"),
    ("validate: one process / local:2", "validate_cluster", "validate_here"),
    ("rate, 4 Parquet parts: one process / local:2", "rate_cluster", "rate_here"),
    ("Boosted search (2 x 3 folds): bare LightGBM / premiumlab", "search_premiumlab", "search_bare"),
)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--policies", type=int, default=200_000, help="policies per book (default 200,000)")
    parser.add_argument("--repeats", type=int, default=3, help="calls per measurement, median (default 3)")
    parser.add_argument("--measure", help=argparse.SUPPRESS)
    parser.add_argument("--folder", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.measure:
        print(json.dumps(measure(args.measure, args.policies, args.repeats, args.folder)))
        return
    load = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as folder:
        child("rate_lightgbm_fit", args.policies, 1, Path(folder))
        cluster_setup(args.policies, Path(folder))
        figures: dict[str, dict] = {}
        lines = []
        for label, ours, theirs in PAIRS:
            for name in (ours, theirs):  # ours first: the profile's powers and rate's premiums feed theirs
                figures[name] = child(name, args.policies, args.repeats, Path(folder))
            a, b = figures[ours], figures[theirs]
            notes = "; ".join(
                f"{key} {value:.3g}" for key, value in {**a, **b}.items() if key not in ("seconds", "peak_mb")
            )
            lines.append(
                f"| {label} | {b['seconds'] / a['seconds']:.2f} | {a['seconds']:.3f} | {b['seconds']:.3f} "
                f"| {a['peak_mb']:.0f} | {b['peak_mb']:.0f} | {notes} |"
            )
    print(
        f"premiumlab benchmarks, {args.policies:,} policies, median of {args.repeats}; {os.cpu_count()} cores, "
        f"{platform.machine()}, Python {platform.python_version()}, load average {load:.1f} at the start; {date.today()}"
    )
    print("| pair | ratio (theirs / ours) | ours s | theirs s | ours peak MB | theirs peak MB | notes |")
    print("|---|---|---|---|---|---|---|")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
