"""The watch-chart options of `seqaudit plan` (--watch-arl0, --watch-p1, --watch-audits)."""
from __future__ import annotations

from ..watching import DEFAULT_AUDITS_PER_YEAR


def add_watch_options(p) -> None:
    p.add_argument("--watch-arl0", type=float, default=None, metavar="N",
                   help="also design the watch chart after a clear: the in-control average "
                        "number of audits between false alarms accepted, e.g. 2000")
    p.add_argument("--watch-p1", type=float, default=None, metavar="P",
                   help="rate the watch chart is tuned to detect (default the plan's p1)")
    p.add_argument("--watch-audits", type=int, default=DEFAULT_AUDITS_PER_YEAR, metavar="N",
                   help="audits in a year: horizon of the chart's false-alarm probability "
                        f"(default {DEFAULT_AUDITS_PER_YEAR})")


def watch_of_args(args, parser):
    """The chart's design (``WatchDesign``) or None when --watch-arl0 is not given."""
    if args.watch_arl0 is None:
        if args.watch_p1 is not None:
            parser.error("argument --watch-p1: needs --watch-arl0")
        return None
    from ..stats import PlanInputError
    from ..stats.watch import design_watch
    p1 = args.p1 if args.watch_p1 is None else args.watch_p1
    try:
        return design_watch(args.p0, p1, args.watch_arl0, args.watch_audits)
    except PlanInputError as exc:
        name = {"p1": "watch-p1", "arl0": "watch-arl0", "audits": "watch-audits"}.get(
            exc.argument, exc.argument)
        parser.error(f"argument --{name}: {exc}")
