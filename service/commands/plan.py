"""Body of `seqaudit plan`.

The numbers on the command line are checked here in plain Python first, so that a bad
command line is answered before numpy and scipy are imported (that import is most of the
command's start-up time). The checks mirror :func:`service.stats.check_rates` and
:class:`service.stats.Recheck`, which still run afterwards as the authority.
"""
from __future__ import annotations

import json
import math
import sys
from pathlib import Path

CHART_FORMATS = (".png", ".svg", ".pdf")


def _finite(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def first_problem(args) -> tuple[str, str] | None:
    """(option, message) for the first value out of range, or None."""
    for name in ("p0", "p1", "alpha", "beta"):
        value = getattr(args, name)
        if not _finite(value):
            return name, f"{name} must be a finite number, got {value!r}"
        if not 0.0 < value < 1.0:
            return name, f"{name} must lie strictly between 0 and 1, got {value}"
    if args.p0 >= args.p1:
        return "p1", f"p1 must be larger than p0, got p0={args.p0} and p1={args.p1}"
    if args.alpha + args.beta >= 1.0:
        return "beta", (f"alpha + beta must be below 1, got alpha={args.alpha} and "
                        f"beta={args.beta}")
    if not _finite(args.cut_llr):
        return "cut_llr", f"cut_llr must be a finite number, got {args.cut_llr!r}"
    for name in ("sensitivity", "specificity"):
        value = getattr(args, name)
        if not _finite(value) or not 0.0 < value <= 1.0:
            return name, f"{name} must lie in (0, 1], got {value}"
    if args.sensitivity + args.specificity <= 1.0:
        return "specificity", ("sensitivity + specificity must exceed 1, got "
                               f"{args.sensitivity} + {args.specificity}: such a re-check "
                               "carries no information about the true rate")
    for value in args.rate or ():
        if not _finite(value) or not 0.0 <= value <= 1.0:
            return "rate", f"a chosen rate must lie in [0, 1], got {value}"
    if args.plot and Path(args.plot).suffix.lower() not in CHART_FORMATS:
        return "plot", f"file must end in {', '.join(CHART_FORMATS)}, got {args.plot!r}"
    if args.plot and not Path(args.plot).resolve().parent.is_dir():
        return "plot", (f"folder {str(Path(args.plot).resolve().parent)!r} does not exist; "
                        "create it first or write the chart elsewhere")
    return None


def run_plan(args, parser) -> int:
    problem = first_problem(args)
    if problem is not None:
        option, message = problem
        parser.error(f"argument --{option.replace('_', '-')}: {message}")
    register_size = getattr(args, "register_size", None)
    register_flags = getattr(args, "register_false_flags", None)
    if (register_size is None) != (register_flags is None):
        parser.error("arguments --register-size and --register-false-flags go together")
    from ..plan_report import render
    from ..stats import PlanInputError, design

    options = {"max_units": args.max_units, "cut_llr": args.cut_llr,
               "calibrate": args.calibrate, "visit_units": args.visit_units,
               "sensitivity": args.sensitivity, "specificity": args.specificity,
               "rates": tuple(args.rate or ())}
    register = None
    try:
        if register_size is not None:
            from ..stats.register import register_design
            result, register = register_design(args.p0, args.p1, args.alpha, args.beta,
                                               register_size, register_flags, **options)
        else:
            result = design(args.p0, args.p1, args.alpha, args.beta, **options)
    except PlanInputError as exc:
        parser.error(f"argument --{exc.argument.replace('_', '-')}: {exc}")
    except ValueError as exc:  # e.g. a cap too small for calibration to meet the risks
        parser.error(str(exc))
    from .watch import watch_of_args
    watch = watch_of_args(args, parser)
    if args.plot:
        from ..charts import save_plan_chart  # matplotlib only when a chart is asked for
        try:
            save_plan_chart(result, args.plot)
        except OSError as exc:   # e.g. a folder without write permission
            parser.error(f"argument --plot: cannot write {args.plot!r}: {exc.strerror or exc}")
    if args.json:
        out = result.to_dict()
        if register is not None:
            out["register"] = register
        out["watch"] = None if watch is None else watch.to_dict()
        json.dump(out, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        if register is not None:
            from ..program import register_lines
            sys.stdout.write("\n".join(register_lines(register)) + "\n\n")
        sys.stdout.write(render(result))
        if watch is not None:
            from ..watching import report_lines
            sys.stdout.write("\n".join(report_lines(watch)) + "\n")
        if args.plot:
            sys.stdout.write(f"\nChart written to {args.plot}\n")
    return 0
