"""The `seqaudit` command line."""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

CHART_FORMATS = (".png", ".svg", ".pdf")
DEFAULT_CONFIG = Path(__file__).resolve().parent.parent / "config" / "seqaudit.toml"


class _Parser(argparse.ArgumentParser):
    """argparse that reports a bad command line in one line and exits 2."""

    def error(self, message):  # noqa: D401 - argparse hook
        self.exit(2, f"{self.prog}: error: {message}\n")


def _unit_count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _rate(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number, got {text!r}") from None
    return value


def _add_plan(sub) -> None:
    p = sub.add_parser("plan", help="design a plan and print its exact figures")
    p.add_argument("--p0", type=_rate, required=True, help="tolerated rate of nonconforming passes")
    p.add_argument("--p1", type=_rate, required=True, help="rate worth acting on")
    p.add_argument("--alpha", type=_rate, required=True, help="risk of flagging at p0")
    p.add_argument("--beta", type=_rate, required=True, help="risk of clearing at p1")
    p.add_argument("--max-units", type=_unit_count, default=None, help="cap N (optional)")
    p.add_argument("--cut-llr", type=_rate, default=0.0,
                   help="at the cap, flag iff LLR >= this (default 0)")
    p.add_argument("--calibrate", action="store_true",
                   help="tune the boundaries so the exact risks meet alpha and beta")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE", help="write OC and ASN curves (.png, .svg, .pdf)")
    p.set_defaults(func=_cmd_plan)


def _add_plans(sub) -> None:
    p = sub.add_parser("plans", help="print the report of every plan in the configuration")
    p.add_argument("--config", default=str(DEFAULT_CONFIG), help="TOML file with [plans.NAME]")
    p.add_argument("--json", action="store_true", help="print one JSON object keyed by plan")
    p.set_defaults(func=_cmd_plans)


def _cmd_plan(args, parser) -> int:
    from .plan_report import render
    from .stats import PlanInputError, design

    if args.plot and Path(args.plot).suffix.lower() not in CHART_FORMATS:
        parser.error(f"argument --plot: file must end in {', '.join(CHART_FORMATS)}, "
                     f"got {args.plot!r}")
    try:
        result = design(args.p0, args.p1, args.alpha, args.beta, max_units=args.max_units,
                        cut_llr=args.cut_llr, calibrate=args.calibrate)
    except PlanInputError as exc:
        parser.error(f"argument --{exc.argument.replace('_', '-')}: {exc}")
    except ValueError as exc:  # e.g. a cap too small for calibration to meet the risks
        parser.error(str(exc))
    if args.plot:
        from .charts import save_plan_chart  # matplotlib only when a chart is asked for
        save_plan_chart(result, args.plot)
    if args.json:
        json.dump(result.to_dict(), sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        sys.stdout.write(render(result))
        if args.plot:
            sys.stdout.write(f"\nChart written to {args.plot}\n")
    return 0


def _cmd_plans(args, parser) -> int:
    from .plan_report import render
    from .plans import ConfigError, load_plans
    from .stats import design

    try:
        plans = load_plans(args.config)
    except ConfigError as exc:
        parser.error(str(exc))
    out = {}
    for name, spec in plans.items():
        result = design(**spec.design_args())
        if args.json:
            out[name] = result.to_dict()
        else:
            sys.stdout.write(render(result, title=f"Plan '{name}'" +
                                    (f": {spec.title}" if spec.title else "")))
            sys.stdout.write("\n")
    if args.json:
        json.dump(out, sys.stdout, indent=2)
        sys.stdout.write("\n")
    return 0


def build_parser() -> _Parser:
    parser = _Parser(prog="seqaudit", description="Sequential audit monitor (SPRT).")
    sub = parser.add_subparsers(dest="command", parser_class=_Parser, metavar="COMMAND")
    sub.required = True
    _add_plan(sub)
    _add_plans(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    sub_parser = parser._subparsers._group_actions[0].choices[args.command]
    return args.func(args, sub_parser)


if __name__ == "__main__":
    sys.exit(main())
