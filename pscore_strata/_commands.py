"""What the ``pscore-strata`` commands do once their options are parsed (:mod:`pscore_strata.cli`
holds the parser and ``main``): check the options, run the analysis, print the key results."""

from __future__ import annotations

import sys
import time
from pathlib import Path

__all__ = ["DEFAULT_OUT", "analyze_command", "demo_command", "simulate_command"]

# Where both commands write their report unless told otherwise.
DEFAULT_OUT = "pscore_report"


class _Progress:
    def __init__(self, quiet):
        self.quiet = quiet
        self.start = time.perf_counter()

    def __call__(self, message):
        if not self.quiet:
            elapsed = time.perf_counter() - self.start
            print(f"[{elapsed:6.1f}s] {message} ...", file=sys.stderr, flush=True)


def _check_bootstrap(n_resamples):
    # Checked before any fitting, so the message names the option rather than the API argument.
    if n_resamples < 0 or n_resamples == 1:
        raise ValueError(
            f"--bootstrap must be 0 (no bootstrap) or at least 2 resamples; got {n_resamples}."
        )
    from .report._honesty import bootstrap_warning

    if bootstrap_warning(n_resamples):
        print(f"warning: {bootstrap_warning(n_resamples)}", file=sys.stderr)


def _check_seed(seed):
    # scikit-learn's random_state (folds, boosting, bootstrap) takes 0 .. 2**32 - 1.
    if not 0 <= seed < 2**32:
        raise ValueError(f"--seed must be an integer from 0 to {2**32 - 1}; got {seed}.")


def _check_out_dir(out):
    # Before the analysis: a wrong --out must not cost a whole analysis, nor leave figures.
    from .report._data import InputError
    from .report._file_checks import check_output_dir

    check_output_dir(out, "--out", InputError)


def _options(args):
    from .report import AnalysisOptions
    from .report._options import trial_settings

    _check_seed(args.seed)
    if args.folds is not None and args.folds < 2:
        raise ValueError(f"--folds must be at least 2; got {args.folds}.")
    _check_bootstrap(args.bootstrap)
    if not 0 < args.level < 1:
        raise ValueError(f"--level must lie strictly between 0 and 1; got {args.level}.")
    return AnalysisOptions(
        method=args.method,
        learner=args.learner,
        folds=args.folds,
        bootstrap=args.bootstrap,
        level=args.level,
        monotonicity=args.monotonicity,
        seed=args.seed,
        event_name=args.event_name,
        unit_name=args.unit_name,
        arm_names=tuple(args.arm_names) if args.arm_names else None,
        missing=args.missing,
        survival_model=args.survival_model,
        quantiles=_quantiles(args.quantiles),
        distributions=args.distributions,
        stratum=_stratum(args),
        visit_population=args.visit_population or "each",
        **trial_settings(args),
    )


def _survival_columns(args):
    """--intermediate is --survival under its general name: exactly one of the two is given."""
    if (args.survival is None) == (args.intermediate is None):
        raise ValueError(
            "Give the binary post-treatment column with --survival COL or --intermediate COL "
            "(the same role under two names); got "
            + ("both." if args.survival is not None else "neither.")
        )
    return args.survival if args.survival is not None else args.intermediate


def _quantiles(text):
    """``--quantiles 0.1,0.5,0.9`` -> sorted distinct probabilities strictly inside (0, 1)."""
    try:
        values = [float(part) for part in str(text).split(",") if part.strip()]
    except ValueError:
        values = None
    if not values or not all(0 < v < 1 for v in values):
        raise ValueError(
            "--quantiles must be comma-separated probabilities strictly between 0 and 1, "
            f"e.g. 0.1,0.25,0.5,0.75,0.9; got {text!r}."
        )
    return tuple(sorted(set(values)))


def _stratum(args):
    from .estimands._strata import resolve_stratum

    try:
        resolve_stratum(args.stratum, args.monotonicity)
    except ValueError as error:
        raise ValueError(str(error).replace("`stratum`", "--stratum").replace(
            "monotonicity=", "--monotonicity ")) from None  # fmt: skip
    return args.stratum


def analyze_command(args):
    from .report import ColumnRoles, analyze_frame, read_table
    from .report._visit_data import visit_pairs

    args.survival = _survival_columns(args)
    options = _options(args)
    _check_out_dir(args.out)
    formats = _table_formats(args)
    progress = _Progress(args.quiet)
    progress(f"reading {args.data}")
    frame = read_table(args.data)
    visits = visit_pairs(args.outcome, args.survival, args.visit_population)
    roles = ColumnRoles(
        outcome=args.outcome[-1],
        treatment=args.treatment,
        survival=args.survival[-1],
        visits=visits,
        covariates=tuple(args.covariates),
        categorical=tuple(args.categorical),
        cluster=args.cluster,
        weights=args.weights,
        by=args.by,
        formula=args.formula,
    )
    analysis = analyze_frame(
        frame, roles, options, args.out, drop_incomplete=args.drop_incomplete,
        source=Path(args.data).name, progress=progress, treated_value=args.treated_value,
        survived_value=args.survived_value,
    )  # fmt: skip
    dropped = analysis.results["data_overview"]["n_rows_dropped"]
    if dropped:
        print(f"Dropped {dropped} incomplete row(s) (--drop-incomplete).", file=sys.stderr)
    _write_tables(analysis, args.out, formats, progress)
    from .report._console import print_key_results

    print_key_results(analysis.results, args.out)
    return 0


def _table_formats(args):
    from .report._manuscript import table_formats

    return () if args.tables is None else table_formats(args.tables)


def _write_tables(analysis, out, formats, progress):
    if formats:
        from .report import write_manuscript_tables

        progress("writing the tables")
        paths = write_manuscript_tables(analysis, out, formats)
        print(f"Tables: {', '.join(str(p) for p in paths)}.")


def demo_command(args):
    from .datasets import DEMO_ROLES, DEMO_TRUE_EFFECT, load_demo
    from .report import AnalysisOptions, ColumnRoles, analyze_frame

    roles = ColumnRoles(
        outcome=DEMO_ROLES["outcome"],
        treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"],
        covariates=tuple(DEMO_ROLES["covariates"]),
        categorical=tuple(DEMO_ROLES["categorical"]),
    )
    _check_bootstrap(args.bootstrap)
    _check_out_dir(args.out)
    formats = _table_formats(args)
    print("Invented critical-care registry (simulated patients, not real people).")
    options = AnalysisOptions(
        bootstrap=args.bootstrap, unit_name="patient",
        arm_names=("protective ventilation", "conventional ventilation"),
        # Pre-specified, as an analysis plan would: the stratum model, the side whose AIC on the
        # registry's survival statuses is smaller (2331.8 against 2335.4 for the arm-wise
        # models). A choice made by fit is invisible to the standard errors
        # (benchmarks/bench_model_choice.py; docs/guide/cli-report.md).
        survival_model="strata",
    )  # fmt: skip
    progress = _Progress(args.quiet)
    analysis = analyze_frame(
        load_demo(), roles, options, args.out,
        source="bundled demo registry (invented)", progress=progress,
    )  # fmt: skip
    _write_tables(analysis, args.out, formats, progress)
    from .report._console import print_key_results

    print_key_results(analysis.results, args.out)
    print(f"(The data were simulated with a true SACE of {DEMO_TRUE_EFFECT:+.1f} points.)")
    return 0


def _simulation_out(args):
    from .report._data import InputError
    from .report._file_checks import check_output_file

    _check_seed(args.seed)
    out = Path(args.out)
    if out.suffix.lower() not in (".csv", ".parquet"):
        raise ValueError(f"--out '{out.name}' must end in .csv or .parquet.")
    check_output_file(out, "--out", InputError)
    return out


def _write_simulated(frame, out):
    """Write through a temporary file, so an interrupted write leaves no half-written data."""
    from .report._file_checks import write_atomic

    if out.suffix.lower() == ".csv":
        return write_atomic(out, lambda path: frame.to_csv(path, index=False))
    return write_atomic(out, lambda path: frame.to_parquet(path, index=False))


def _survival_column(values):
    import numpy as np

    survival = np.asarray(values, dtype=float)
    return survival if np.isnan(survival).any() else survival.astype(int)


def _write_visits(args, data, frame, out):
    """A scenario with repeated visits: one survival and one outcome column per visit."""
    visits = list(data.y_visits.columns)
    for visit in visits:
        frame[f"survival_{visit}"] = _survival_column(data.survival_visits[visit])
        frame[f"outcome_{visit}"] = data.y_visits[visit].to_numpy()
    replaced = _write_simulated(frame, out)
    truths = ", ".join(f"{visit} {data.true_effects.loc[visit, 'each']:.4f}" for visit in visits)
    print(f"Wrote {len(frame)} rows of scenario '{args.scenario}' to {out}"
          f"{' (replacing the file there)' if replaced else ''}, {len(visits)} visits; true "
          f"SACE to each visit: {truths}.")  # fmt: skip
    covariates = " ".join(c for c in frame.columns if c.startswith("x"))
    columns = " ".join(f"--outcome outcome_{v} --survival survival_{v}" for v in visits)
    missing = frame.filter(like="survival_").isna().any().any() or frame.filter(
        like="outcome_").isna().to_numpy()[frame.filter(like="survival_").to_numpy() == 1].any()
    print(f"Analyse it with: pscore-strata analyze {out} --treatment treatment {columns} "
          f"--covariates {covariates}" + (" --missing at_random" if missing else ""))
    return 0


def simulate_command(args):
    import numpy as np
    import pandas as pd

    from .datasets import list_scenarios, make_scenario

    names = list_scenarios()["name"].tolist()
    if args.scenario not in names:
        raise ValueError(f"Unknown scenario '{args.scenario}'. Available: {', '.join(names)}.")
    if args.n < 10:
        raise ValueError(f"--n must be at least 10 rows; got {args.n}.")
    out = _simulation_out(args)
    data = make_scenario(args.scenario, args.n, random_state=args.seed)
    frame = pd.DataFrame(data.X, columns=[f"x{j + 1}" for j in range(data.X.shape[1])])
    frame["treatment"] = np.asarray(data.treatment, dtype=int)
    if data.get("y_visits") is not None:
        return _write_visits(args, data, frame, out)
    # Scenarios with missing data leave survival blank where the status is unknown.
    frame["survival"] = _survival_column(data.survival)
    frame["outcome"] = data.y
    if data.get("groups") is not None:
        frame["cluster"] = data.groups
    replaced = _write_simulated(frame, out)
    covariates = " ".join(c for c in frame.columns if c.startswith("x"))
    # The intermediate_* scenarios (datasets/_intermediate.py) know every stratum's effect.
    stratum = data.get("target_stratum")
    truth = "true SACE" if stratum in (None, "always_survivor") else f"true {stratum} effect"
    print(f"Wrote {len(frame)} rows of scenario '{args.scenario}' to {out}"
          f"{' (replacing the file there)' if replaced else ''}; {truth} "
          f"{data.true_effect:.4f}.")  # fmt: skip
    role = "--survival survival" if stratum is None else "--intermediate survival"
    if stratum is not None:
        role += f" --stratum {stratum}" + (
            " --monotonicity decreasing" if data.params["monotonicity"] == "decreasing" else "")
    print(f"Analyse it with: pscore-strata analyze {out} --outcome outcome --treatment treatment "
          f"{role} --covariates {covariates}"
          + (" --cluster cluster" if "cluster" in frame else "")
          + (" --missing at_random" if frame[["survival", "outcome"]].isna().any().any()
             and "status_known" in data else ""))  # fmt: skip
    return 0
