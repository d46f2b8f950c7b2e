"""``heft study grr``: a crossed gauge R&R study, run on the simulated bench.

n clubs x k operators x r trials in the randomised order of ``grr_plan``; each trial is a
simulated operator laying an invented Larkspur Clubworks club on a simulated two-support beam,
captured through the real driver and pipeline in virtual time
(``heft.daemon.quality_study``). The figures are ``heft.daemon.quality.grr``'s. The simulator
and the statistics are imported only when the command runs.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import Any

UNITS = {"swingweight": "points", "weight": "g"}
MAX_OPERATORS = 26  # named A to Z


def _count(minimum: int, maximum: int | None = None) -> Any:
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
        if value < minimum or (maximum is not None and value > maximum):
            upper = f" to {maximum}" if maximum is not None else " or more"
            raise argparse.ArgumentTypeError(f"expected {minimum}{upper}, got {value}")
        return value

    return parse


def _positive(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise argparse.ArgumentTypeError(f"expected a number above zero, got {text!r}")
    return value


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "study",
        help="measurement-system studies (gauge R&R), today on the simulated bench",
        description="Measurement-system studies. 'heft study grr' runs a gauge R&R study.",
    )
    studies = parser.add_subparsers(dest="study", metavar="STUDY", required=True)
    grr = studies.add_parser(
        "grr",
        help="crossed gauge R&R study (ANOVA method) on the simulated bench",
        description=(
            "Run a crossed gauge R&R study on the simulated bench: every club measured by "
            "every simulated operator on every trial, in a random order, each placement "
            "captured through the real driver and pipeline in virtual time. Prints the ANOVA "
            "table, variance components, %%GRR of total variation and of the tolerance, ndc "
            "and the verdict. A guided study on a real bench is not built yet."
        ),
    )
    grr.add_argument("--clubs", type=_count(2), default=10, metavar="N", help="clubs (10)")
    grr.add_argument(
        "--operators",
        type=_count(2, MAX_OPERATORS),
        default=3,
        metavar="K",
        help="simulated operators, named A, B, C... (3)",
    )
    grr.add_argument("--trials", type=_count(2), default=3, metavar="R", help="trials (3)")
    grr.add_argument("--seed", type=int, default=1, metavar="S", help="seed (1)")
    grr.add_argument("--quantity", choices=("swingweight", "weight"), default="swingweight")
    grr.add_argument(
        "--tolerance-points",
        type=_positive,
        metavar="POINTS",
        help="USL - LSL in swing-weight points (default: the spec's tolerance x 2)",
    )
    grr.add_argument(
        "--tolerance-g",
        type=_positive,
        metavar="GRAMS",
        help="USL - LSL in grams, with --quantity weight (default: the spec's weight band)",
    )
    grr.add_argument("--json", action="store_true", help="print the figures as JSON")
    grr.add_argument("--csv", type=Path, metavar="FILE", help="write the raw table as CSV")
    grr.add_argument("--verbose", action="store_true", help="print each step of the study")
    grr.set_defaults(func=_run, parser=grr)


def _check_tolerance(args: argparse.Namespace) -> None:
    parser: argparse.ArgumentParser = args.parser
    if args.quantity == "weight" and args.tolerance_points is not None:
        parser.error(
            "argument --tolerance-points: applies to --quantity swingweight; "
            "give --tolerance-g for weight"
        )
    if args.quantity == "swingweight" and args.tolerance_g is not None:
        parser.error(
            "argument --tolerance-g: applies to --quantity weight; "
            "give --tolerance-points for swing weight"
        )


def _run(args: argparse.Namespace) -> int:
    _check_tolerance(args)
    from heft.daemon.quality.grr import gauge_rr
    from heft.daemon.quality.grr_plan import study_plan
    from heft.daemon.quality.inputs import QualityInputError
    from heft.daemon.quality_study import (
        StudyRunError,
        larkspur_study_clubs,
        run_study,
        simulated_operators,
        spec_tolerance,
    )
    from heft.tui.commands._study_report import figures_json, report_lines, write_csv

    plan = study_plan(args.clubs, args.operators, args.trials, seed=args.seed, part_noun="club")
    clubs = larkspur_study_clubs(plan.parts, args.seed)
    operators = simulated_operators(plan.operators, args.seed)
    try:
        trials, config = run_study(plan, clubs, operators, seed=args.seed)
    except StudyRunError as err:
        print(f"heft study grr: {err}", file=sys.stderr)
        return 1
    quantity, unit = args.quantity, UNITS[args.quantity]
    readings = [t.reading(quantity) for t in trials]
    if args.verbose:
        steps = sys.stderr if args.json else sys.stdout
        for done, trial in enumerate(trials):
            print(f"{plan.describe_next(done)}: {trial.value(quantity):.3f} {unit}", file=steps)
    if args.csv is not None:
        try:
            write_csv(args.csv, readings)
        except OSError as err:
            print(
                f"heft study grr: --csv {args.csv}: cannot write ({err.strerror})", file=sys.stderr
            )
            return 2
    given = args.tolerance_points if quantity == "swingweight" else args.tolerance_g
    tolerance = given if given is not None else spec_tolerance(config, quantity)
    try:
        result = gauge_rr(readings, tolerance=tolerance)
    except QualityInputError as err:
        print(f"heft study grr: {err}", file=sys.stderr)
        return 1
    study = {
        "clubs": args.clubs,
        "operators": args.operators,
        "trials": args.trials,
        "seed": args.seed,
        "quantity": quantity,
        "unit": unit,
        "bench": "simulated",
    }
    if args.json:
        print(json.dumps(figures_json(result, study), indent=2))
        return 0
    header = (
        f"Gauge R&R on the simulated bench: {args.clubs} clubs x {args.operators} operators x "
        f"{args.trials} trials, {quantity} ({unit}), seed {args.seed}"
    )
    print("\n".join(report_lines(result, header, unit)))
    return 0
