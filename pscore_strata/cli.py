"""Command line: ``pscore-strata analyze | demo | simulate``.

``analyze`` runs a complete SACE analysis of a data file (CSV, Parquet, Stata, SAS, SPSS) and
writes a shareable report (the work is done by :mod:`pscore_strata.report`); ``demo`` does the
same on the bundled, invented critical-care registry; ``simulate`` writes data with a known
SACE. A user error prints one line and exits with status 2; progress goes to standard error.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

__all__ = ["main", "build_parser"]

TABLES_HELP = ("also write the tables for a manuscript: comma-separated formats among docx, tex "
               "and md (tables.docx, tables.tex, tables.md in --out)")
USER_ERRORS = (ValueError, TypeError, FileNotFoundError, ImportError, OSError, RuntimeError)
# Where both commands write their report unless told otherwise.
DEFAULT_OUT = "pscore_report"


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        # One line, no usage block: the user reads what went wrong and where to look.
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


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
        stratum=_stratum(args),
        visit_population=args.visit_population or "each",
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


def _stratum(args):
    from .estimators._stratum_formulas import resolve_stratum

    try:
        resolve_stratum(args.stratum, args.monotonicity)
    except ValueError as error:
        raise ValueError(str(error).replace("`stratum`", "--stratum").replace(
            "monotonicity=", "--monotonicity ")) from None  # fmt: skip
    return args.stratum


def _print_survival_model(results):
    chosen = results.get("survival_model")
    if chosen:
        print(f"  Principal scores from the {chosen['label']} (--survival-model "
              f"{chosen['model']}): {chosen['description']}")  # fmt: skip
        if chosen["reason"]:
            print(f"  Chosen by fit: {chosen['reason']}")
    checks = results.get("model_checks") or {}
    for test in checks.get("fit_check", {}).get("tests", []):
        if test["arm"] == "both" and test["p_value"] is not None:
            print(f"  Survival fit check, both arms: chi-square {test['statistic']:.2f} on "
                  f"{test['df']} df, p = {test['p_value']:.3f}")  # fmt: skip


def _print_key_results(results, out_dir):
    from .report._format import interval, number

    level = f"{results['settings']['level']:.0%}"
    words = results["wording"]
    target = results.get("stratum") or {"name": "always_survivor"}
    other = target["name"] != "always_survivor"
    title = (f"Effect in the {target['label']} stratum" if other
             else "Survivor average causal effect")  # fmt: skip
    print(f"{title} of {words['treated_arm']} "
          f"('{words['treated_condition']}') against {words['control_arm']} "
          f"('{words['control_condition']}') on '{results['columns']['outcome']}' "
          f"({results['data_overview']['n_rows_analyzed']} {words['units']} "
          "analysed):")  # fmt: skip
    for record in results["estimates"]:
        tag = "  <- primary" if record["primary"] else ""
        if record["ci_low"] is None:
            print(f"  {record['label']:<27} {number(record['effect']):>10}   "
                  f"interval not available (see below){tag}")  # fmt: skip
        else:
            print(f"  {record['label']:<27} {number(record['effect']):>10}   {level} CI "
                  f"{interval(record['ci_low'], record['ci_high'])}{tag}")  # fmt: skip
    boot = results.get("bootstrap")
    if boot:
        print(f"  {'Bootstrap (percentile)':<27} {number(boot['estimate']):>10}   {level} CI "
              f"{interval(boot['ci_low'], boot['ci_high'])}")  # fmt: skip
    bounds = results.get("bounds", {})
    if "lower" in bounds:
        print(f"  {'Bounds (no princ. ignor.)':<27} {number(bounds['lower']):>10} to "
              f"{number(bounds['upper'])}")  # fmt: skip
    missing = results.get("missing_data") or {}
    for arm in missing.get("by_arm", []):
        print(f"  Missing data, {arm['arm']}: status unknown {arm['n_status_unknown']} "
              f"({arm['share_status_unknown']:.1%}), outcome missing {arm['n_outcome_missing']} "
              f"of {arm['n_known_survivors']} known survivors "
              f"({arm['share_outcome_missing']:.1%}); assumed missing at random")  # fmt: skip
    shift = missing.get("outcome_shift") or {}
    if shift:
        value = shift["smallest_shift_covering_zero"]
        shown = "not within the grid" if value is None else f"{value:.3g}"
        print(f"  Non-responders' outcome shift at which the CI covers 0: {shown}")
    naive = results["naive_survivor_contrast"]
    print(f"  {'Naive cell contrast' if other else 'Naive survivor contrast':<27} "
          f"{number(naive['estimate']):>10}   (biased; comparison)")  # fmt: skip
    for row in (results.get("strata") or {}).get("rows", []):
        print(f"  All strata: {row['label']:<27} share {row['share']:.1%}, effect "
              f"{number(row['effect'])}, {level} CI {interval(row['ci_low'], row['ci_high'])}")
    for record in results["estimates"]:
        if record["ci_low"] is None:
            print(f"  {record['label']}: {record['interval_note']}")
    sens = results.get("sensitivity", {})
    if "pi_difference" in sens:
        tip = sens["pi_difference"]["tipping_point"]
        sd = sens["pi_difference"]["outcome_sd_survivors"]
        shown = ("not reached" if tip is None else
                 f"{number(tip)} {results['columns']['outcome']} units "
                 f"({number(tip / sd)} outcome SDs)")  # fmt: skip
        if tip is None and sens.get("interval_note"):
            shown = "not available"
        print(f"  Tipping point for principal ignorability (difference): {shown}")
    for subgroup in (results.get("subgroups") or {}).get("rows", []):
        shown = (f"{level} CI {interval(subgroup['ci_low'], subgroup['ci_high'])}"
                 if subgroup["ci_low"] is not None else "interval not available")  # fmt: skip
        print(f"  {results['subgroups']['column']} = {subgroup['label']!s:<16} "
              f"{number(subgroup['effect']):>10}   {shown} ({subgroup['n']} rows)")  # fmt: skip
    _print_survival_model(results)
    for message in results.get("diagnostics", {}).get("warnings", []):
        print(f"  warning: {message}")
    for message in results.get("warnings", []):
        if message.startswith("data: "):
            print(f"  warning: {message[6:]}")
    from .report._visits import print_visits

    print_visits(results)
    print(f"Report: {Path(out_dir) / 'report.html'} (also results.json and the figures).")
    stratum = f"the {target['label']} stratum" if other else "the always-survivor stratum"
    print(f"Caution: {stratum} is latent and the assumptions are untestable; "
          "no individual decisions. Follow the study protocol and local regulation, and have a "
          "qualified statistician review the analysis.")  # fmt: skip


def _analyze(args):
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
    _print_key_results(analysis.results, args.out)
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


def _demo(args):
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
    _print_key_results(analysis.results, args.out)
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


def _simulate(args):
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
    # Scenarios with missing data leave survival blank where the status is unknown.
    survival = np.asarray(data.survival, dtype=float)
    frame["survival"] = survival if np.isnan(survival).any() else survival.astype(int)
    frame["outcome"] = data.y
    if data.get("groups") is not None:
        frame["cluster"] = data.groups
    replaced = _write_simulated(frame, out)
    covariates = " ".join(c for c in frame.columns if c.startswith("x"))
    print(f"Wrote {len(frame)} rows of scenario '{args.scenario}' to {out}"
          f"{' (replacing the file there)' if replaced else ''}; true SACE "
          f"{data.true_effect:.4f}.")  # fmt: skip
    print(f"Analyse it with: pscore-strata analyze {out} --outcome outcome --treatment treatment "
          f"--survival survival --covariates {covariates}"
          + (" --cluster cluster" if "cluster" in frame else "")
          + (" --missing at_random" if frame[["survival", "outcome"]].isna().any().any()
             and "status_known" in data else ""))  # fmt: skip
    return 0


def build_parser():
    parser = _Parser(
        prog="pscore-strata",
        description="Survivor average causal effects for outcomes truncated by death.",
    )
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    analyze = commands.add_parser(
        "analyze", help="analyse a CSV or Parquet file and write a shareable report",
        description="Estimate the survivor average causal effect and write report.html, "
        "results.json and the figures into --out.",
    )  # fmt: skip
    analyze.add_argument(
        "data", metavar="DATA",
        help="a .csv (comma or semicolon), .parquet, .dta, .sas7bdat or .sav file, one row per "
        "unit",
    )  # fmt: skip
    analyze.add_argument(
        "--outcome", required=True, action="append", metavar="COL",
        help="outcome column (may be empty for non-survivors); repeated with as many "
        "--survival columns, one per follow-up visit in time order, it adds the section "
        "'Over visits' (the other sections analyse the last visit)",
    )  # fmt: skip
    analyze.add_argument(
        "--treatment", required=True, metavar="COL",
        help="treatment column: 0/1, or two levels with --treated-value",
    )  # fmt: skip
    analyze.add_argument(
        "--treated-value", default=None, metavar="VALUE",
        help="level of --treatment that means treated (for text-coded arms, e.g. program)",
    )  # fmt: skip
    analyze.add_argument(
        "--survival", action="append", metavar="COL",
        help="0/1 column: 1 if the unit survived (its outcome exists); or two levels with "
        "--survived-value; repeated: survival to each visit, matching the --outcome columns",
    )  # fmt: skip
    analyze.add_argument(
        "--intermediate", action="append", metavar="COL",
        help="the same role as --survival under its general name: a binary post-treatment "
        "variable (treatment received under noncompliance, an intercurrent event); give "
        "--survival or --intermediate, not both",
    )  # fmt: skip
    analyze.add_argument(
        "--survived-value", default=None, metavar="VALUE",
        help="level of --survival that means survived / no event (e.g. yes)",
    )  # fmt: skip
    analyze.add_argument(
        "--covariates",
        nargs="*",
        default=[],
        metavar="COL",
        help="pre-treatment covariates (none: unadjusted analysis)",
    )
    analyze.add_argument(
        "--categorical",
        nargs="*",
        default=[],
        metavar="COL",
        help="categorical covariates, one-hot coded (added to the covariates)",
    )
    analyze.add_argument(
        "--method",
        choices=("weighting", "regression", "robust"),
        default="robust",
        help="primary estimator (default: robust); the report shows all three",
    )
    analyze.add_argument(
        "--learner",
        choices=("linear", "boosting"),
        default="linear",
        help="linear: logistic/linear models; boosting: histogram gradient "
        "boosting with cross-fitting",
    )
    analyze.add_argument(
        "--folds",
        type=int,
        default=None,
        metavar="K",
        help="cross-fitting folds (default: none for linear, 5 for boosting; 2 for boosting "
        "above 200,000 rows)",
    )
    analyze.add_argument(
        "--bootstrap",
        type=int,
        default=0,
        metavar="N",
        help="bootstrap resamples refitting every model (default: 0)",
    )
    analyze.add_argument(
        "--cluster",
        default=None,
        metavar="COL",
        help="cluster column: cluster-robust standard errors",
    )
    analyze.add_argument(
        "--weights", default=None, metavar="COL", help="survey or sampling weight column"
    )
    analyze.add_argument(
        "--drop-incomplete",
        action="store_true",
        help="drop rows with missing values (reported) instead of stopping",
    )
    analyze.add_argument(
        "--monotonicity",
        choices=("increasing", "decreasing"),
        default="increasing",
        help="increasing: treatment can only help survival (default)",
    )
    analyze.add_argument(
        "--stratum",
        choices=("always_survivor", "protected", "doomed", "harmed", "always_taker", "complier",
                 "never_taker"),
        default="always_survivor",
        help="principal stratum whose effect the report is about (default always_survivor, the "
        "SACE). The others need the outcome of units with intermediate 0 (not truncation by "
        "death): protected/complier and doomed/never_taker under --monotonicity increasing, "
        "harmed and doomed under decreasing; always_taker = always_survivor",
    )  # fmt: skip
    analyze.add_argument(
        "--missing",
        choices=("error", "at_random"),
        default="error",
        help="at_random: blank survival = status unknown (lost to follow-up), blank outcome of "
        "a survivor = not observed; both assumed missing at random given the covariates within "
        "each arm (default: error)",
    )
    analyze.add_argument(
        "--survival-model", choices=("arm-wise", "strata"), default="arm-wise",
        help="arm-wise: a survival model in each arm, principal scores from their difference "
        "(default); strata: one multinomial logistic model of stratum membership fitted on "
        "both arms, monotone by construction (also with --learner boosting, which then "
        "applies to the treatment and outcome models)",
    )  # fmt: skip
    analyze.add_argument(
        "--visit-population", choices=("each", "last"), default=None,
        help="with several visits: each = the always-survivors to each visit (a different "
        "group per visit; default); last = the always-survivors to the last visit at every "
        "visit (one group)",
    )  # fmt: skip
    analyze.add_argument("--level", type=float, default=0.95, help="confidence level")
    analyze.add_argument("--seed", type=int, default=0, help="random seed (folds, bootstrap)")
    analyze.add_argument(
        "--out", default=DEFAULT_OUT, metavar="DIR",
        help=f"output directory (default: {DEFAULT_OUT})",
    )  # fmt: skip
    analyze.add_argument(
        "--event-name", default="death", metavar="TEXT",
        help="what the event that truncates the outcome is called (default: death)",
    )  # fmt: skip
    analyze.add_argument(
        "--unit-name", default="unit", metavar="TEXT",
        help="what one row is, e.g. worker or person/people (default: unit)",
    )  # fmt: skip
    analyze.add_argument(
        "--arm-names", nargs=2, default=None, metavar=("TREATED", "CONTROL"),
        help="names of the two arms (default: the treatment levels, or treatment / control)",
    )  # fmt: skip
    analyze.add_argument(
        "--by", default=None, metavar="COL",
        help="subgroup effects by this column (from the fitted models, no refit)",
    )  # fmt: skip
    analyze.add_argument(
        "--formula", metavar="FORMULA",
        help='covariates as a formula instead of --covariates/--categorical, e.g. "age + '
        'severity + C(site) + bs(bmi, 4)" (C(): categorical, bs(): B-spline; needs formulaic)',
    )  # fmt: skip
    analyze.add_argument("--tables", metavar="FORMATS", help=TABLES_HELP)
    analyze.add_argument("--quiet", action="store_true", help="no progress messages")
    analyze.set_defaults(handler=_analyze)  # fmt: skip

    demo = commands.add_parser("demo", help="analyse the bundled, invented demo registry")
    demo.add_argument(
        "--out", default=DEFAULT_OUT, metavar="DIR",
        help=f"output directory (default: {DEFAULT_OUT})",
    )  # fmt: skip
    demo.add_argument(
        "--bootstrap", type=int, default=0, metavar="N", help="bootstrap resamples (default: 0)"
    )
    demo.add_argument("--tables", metavar="FORMATS", help=TABLES_HELP)
    demo.add_argument("--quiet", action="store_true", help="no progress messages")
    demo.set_defaults(handler=_demo)  # fmt: skip

    simulate = commands.add_parser("simulate", help="write simulated data with a known SACE")
    simulate.add_argument(
        "scenario",
        metavar="SCENARIO",
        help="scenario name (see pscore_strata.datasets.list_scenarios())",
    )
    simulate.add_argument("--n", type=int, default=2000, help="number of rows (default: 2000)")
    simulate.add_argument("--out", required=True, metavar="FILE", help="a .csv or .parquet file")
    simulate.add_argument("--seed", type=int, default=0, help="random seed (default: 0)")
    simulate.set_defaults(handler=_simulate)  # fmt: skip
    return parser


def main(argv=None):
    """Run the command line; returns the exit status."""
    args = build_parser().parse_args(argv)
    try:
        return args.handler(args)
    except USER_ERRORS as error:
        message = " ".join(str(error).split()) or type(error).__name__
        print(f"pscore-strata {args.command}: error: {message}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
