"""Command line: ``pscore-strata demo`` fits the estimators on the bundled demo registry."""

from __future__ import annotations

import argparse
import sys
import warnings

import pandas as pd

CAUTION = (
    "Caution: the always-survivor stratum is latent (nobody can be identified as one), and the "
    "estimate rests on untestable assumptions (treatment ignorability, monotonicity, principal "
    "ignorability). It describes a population, never an individual patient: do not use it for "
    "individual decisions. Follow the study protocol and local regulation, and have a qualified "
    "statistician review the analysis."
)


def _demo(args):
    from . import MultiplyRobust, PrincipalScoreWeighting
    from .datasets import DEMO_ROLES, DEMO_TRUE_EFFECT, load_demo

    data = load_demo()
    roles = DEMO_ROLES
    X = pd.get_dummies(
        data[roles["covariates"]], columns=roles["categorical"], drop_first=True, dtype=float
    )
    print(
        f"Invented critical-care registry: {len(data)} patients; treatment "
        f"'{roles['treatment']}', survival '{roles['survival']}', outcome '{roles['outcome']}'."
    )
    print(f"Covariates: {', '.join(roles['covariates'])} (categorical: site, one-hot coded).\n")
    pd.set_option("display.width", 120)
    for estimator in (PrincipalScoreWeighting(), MultiplyRobust()):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            estimator.fit(
                X,
                data[roles["outcome"]],
                treatment=data[roles["treatment"]],
                survival=data[roles["survival"]],
            )
        table = estimator.summary()
        print(f"== {type(estimator).__name__} ==")
        print(table.round(3).to_string())
        for note in table.attrs["notes"]:
            print(f"  note: {note}")
        for warning in caught:
            print(f"  warning: {warning.message}")
        print()
    print(f"(The demo data are simulated: their true SACE is {DEMO_TRUE_EFFECT:+.1f} points.)")
    print(CAUTION)
    return 0


def build_parser():
    parser = argparse.ArgumentParser(
        prog="pscore-strata",
        description="Survivor average causal effects for outcomes truncated by death.",
    )
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="analyze the bundled, invented demo registry")
    demo.set_defaults(handler=_demo)
    return parser


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.handler(args)
    except (ValueError, TypeError, FileNotFoundError) as error:
        print(f"pscore-strata: error: {error}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
