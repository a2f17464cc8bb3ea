"""Command line: ``pscore-strata analyze | demo | simulate``.

``analyze`` runs a complete SACE analysis of a data file (CSV, Parquet, Stata, SAS, SPSS) and
writes a shareable report (the work is done by :mod:`pscore_strata.report`); ``demo`` does the
same on the bundled, invented critical-care registry; ``simulate`` writes data with a known
SACE. A user error prints one line and exits with status 2; progress goes to standard error.
"""

from __future__ import annotations

import argparse
import sys

from ._commands import DEFAULT_OUT, analyze_command, demo_command, simulate_command
from .estimands._methods import METHOD_NAMES

__all__ = ["main", "build_parser"]

TABLES_HELP = ("also write the tables for a manuscript: comma-separated formats among docx, tex "
               "and md (tables.docx, tables.tex, tables.md in --out)")
USER_ERRORS = (ValueError, TypeError, FileNotFoundError, ImportError, OSError, RuntimeError)


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        # One line, no usage block: the user reads what went wrong and where to look.
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


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
        choices=METHOD_NAMES,
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
    analyze.add_argument(
        "--quantiles", default="0.1,0.25,0.5,0.75,0.9", metavar="LIST",
        help="comma-separated probabilities of the quantile effects and their bounds in the "
        "distributions section (default: 0.1,0.25,0.5,0.75,0.9)",
    )  # fmt: skip
    analyze.add_argument(
        "--no-distributions", dest="distributions", action="store_false",
        help="skip the distributions section (CDFs, quantile effects, level shares); the "
        "report says it was skipped",
    )  # fmt: skip
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
    from .report._options import add_trial_arguments

    add_trial_arguments(analyze)
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
    analyze.set_defaults(handler=analyze_command)  # fmt: skip

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
    demo.set_defaults(handler=demo_command)  # fmt: skip

    simulate = commands.add_parser("simulate", help="write simulated data with a known SACE")
    simulate.add_argument(
        "scenario",
        metavar="SCENARIO",
        help="scenario name (see pscore_strata.datasets.list_scenarios())",
    )
    simulate.add_argument("--n", type=int, default=2000, help="number of rows (default: 2000)")
    simulate.add_argument("--out", required=True, metavar="FILE", help="a .csv or .parquet file")
    simulate.add_argument("--seed", type=int, default=0, help="random seed (default: 0)")
    simulate.set_defaults(handler=simulate_command)  # fmt: skip
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
