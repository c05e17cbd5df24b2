"""The `seqaudit` command line."""
from __future__ import annotations

import argparse
import json
import re
import sys
from pathlib import Path

from .commands.plan import CHART_FORMATS  # plain Python: no numpy at parse time
from .errors import SchemaTooNew



class _Parser(argparse.ArgumentParser):
    """argparse that reports a bad command line in one line and exits 2.

    A value such as ``-3``, ``-1e20`` or ``-inf`` after an option is that option's value
    (argparse's own pattern only knows plain negative decimals).
    """

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._negative_number_matcher = re.compile(
            r"^-(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$|^-(inf|infinity|nan)$", re.IGNORECASE)

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
    p.add_argument("--visit-units", type=_unit_count, default=1, metavar="K",
                   help="units per record: the boundaries are looked at every K units "
                        "(default 1)")
    p.add_argument("--sensitivity", type=_rate, default=1.0,
                   help="chance a re-check finds a truly nonconforming unit (default 1)")
    p.add_argument("--specificity", type=_rate, default=1.0,
                   help="chance a re-check passes a truly conforming unit (default 1)")
    p.add_argument("--rate", type=_rate, action="append", default=[], metavar="P",
                   help="also report the figures at this true rate (repeatable)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE", help="write OC and ASN curves (.png, .svg, .pdf)")
    p.add_argument("--register-size", type=_unit_count, default=None, metavar="K",
                   help="facilities in the register: design for alpha = F / K per facility")
    p.add_argument("--register-false-flags", type=_rate, default=None, metavar="F",
                   help="expected false flags allowed over the register (with --register-size)")
    from .commands.watch import add_watch_options
    add_watch_options(p)
    p.set_defaults(func=_cmd_plan)


def _add_plans(sub) -> None:
    p = sub.add_parser("plans", help="print the report of every plan in the configuration")
    p.add_argument("--config", default=None,
                   help="TOML file with [plans.NAME] (default: SEQAUDIT_CONFIG, else "
                        "config/seqaudit.toml)")
    p.add_argument("--json", action="store_true", help="print one JSON object keyed by plan")
    p.set_defaults(func=_cmd_plans)


def _cmd_plan(args, parser) -> int:
    from .commands.plan import run_plan
    return run_plan(args, parser)


def _cmd_plans(args, parser) -> int:
    from .plan_report import render
    from .plans import ConfigError, load_plans
    from .settings import config_file
    from .stats import design

    try:
        plans = load_plans(config_file(args.config))
    except ConfigError as exc:
        parser.error(str(exc))
    out = {}
    for name, spec in plans.items():
        result = design(**spec.design_args())
        if args.json:
            out[name] = result.to_dict()
            from .watching import design_for
            out[name]["watch"] = (None if spec.watch is None else
                                  design_for(spec.p0, spec.p1, spec.watch).to_dict())
        else:
            sys.stdout.write(render(result, title=f"Plan '{name}'" +
                                    (f": {spec.title}" if spec.title else "")))
            if spec.watch is not None:
                from .watching import design_for, report_lines
                sys.stdout.write("\n".join(report_lines(design_for(spec.p0, spec.p1,
                                                                    spec.watch))) + "\n")
            sys.stdout.write("\n")
    if args.json:
        json.dump(out, sys.stdout, indent=2)
        sys.stdout.write("\n")
    return 0


def _settings(args):
    """Settings from --config (or SEQAUDIT_CONFIG), the environment and the options given."""
    from .plans import ConfigError
    from .settings import load_settings

    over = {k: getattr(args, k, None) for k in ("host", "port", "workers")}
    if getattr(args, "db", None):
        over["db_path"] = Path(args.db).resolve()
    try:
        return load_settings(getattr(args, "config", None), **over)
    except ConfigError as exc:
        raise SystemExit(f"seqaudit: error: {exc}")


def _db_source(args, settings) -> str:
    import os
    if getattr(args, "db", None):
        return "--db"
    if os.environ.get("SEQAUDIT_DB"):
        return "SEQAUDIT_DB"
    return f"the [service] db of {settings.config_path}"


def _existing_db(args, parser, create: bool = False) -> Path:
    """The database path of a command; unless ``create``, one that does not exist is an
    error that says which path was tried and how to point at another (e.g. the demo's)."""
    settings = _settings(args)
    path = settings.db_path
    if not create and not path.exists():
        demo = Path(__file__).resolve().parent.parent / "data" / "demo.db"
        parser.error(f"no database at {path} (from {_db_source(args, settings)}); give one with "
                     f"--db PATH or SEQAUDIT_DB=PATH, e.g. --db {demo} for the demo's "
                     "(made by scripts/run)")
    return path


def _add_service_options(p, db_default=None) -> None:
    p.add_argument("--db", default=db_default, help="SQLite file (default from the config)")
    p.add_argument("--config", default=None, help="TOML configuration file")


def _add_serve(sub) -> None:
    p = sub.add_parser("serve", help="run the monitoring service (uvicorn)")
    _add_service_options(p)
    p.add_argument("--host", default=None)
    p.add_argument("--port", type=_unit_count, default=None)
    p.add_argument("--workers", type=_unit_count, default=None)
    p.set_defaults(func=lambda a, _p: __import__("service.commands.serve", fromlist=["x"])
                   .serve(_settings(a)))


def _add_demo(sub) -> None:
    p = sub.add_parser("demo", help="seed the demo scenario, serve it and feed simulated posts")
    _add_service_options(p)
    p.add_argument("--host", default=None)
    p.add_argument("--port", type=_unit_count, default=None)
    p.add_argument("--minutes", type=float, default=10.0, help="how long to feed (default 10)")
    p.add_argument("--rate", type=float, default=5.0, help="posts per second (default 5)")

    def run(a, _p):
        from .commands.demo import run_demo
        return run_demo(_settings(a), a.minutes, a.rate)

    p.set_defaults(func=run)


def _add_keys(sub) -> None:
    p = sub.add_parser("keys", help="manage API keys")
    ks = p.add_subparsers(dest="keys_command", parser_class=_Parser, metavar="ACTION")
    ks.required = True
    add = ks.add_parser("add", help="create a key and print it (only the key, on stdout)")
    _add_service_options(add)
    add.add_argument("--role", required=True, choices=("field", "analyst", "admin"))
    add.add_argument("--label", required=True)
    add.add_argument("--expires", default=None, metavar="WHEN",
                     help="the key stops working after this long (e.g. 90d, 12h, 2w) or at "
                          "this RFC 3339 time")
    lst = ks.add_parser("list", help="list keys (never the keys themselves)")
    _add_service_options(lst)
    rev = ks.add_parser("revoke", help="revoke a key by id")
    _add_service_options(rev)
    rev.add_argument("key_id", type=int)

    def keys_cmd(name):   # the store (and what it imports) only once a command runs
        def run(a, parser):
            from .commands import keys as k
            db = _existing_db(a, parser, create=name == "add")
            if name == "add":
                return k.add(db, a.role, a.label, a.expires)
            return k.list_keys(db) if name == "list" else k.revoke(db, a.key_id)
        return run

    add.set_defaults(func=keys_cmd("add"))
    lst.set_defaults(func=keys_cmd("list"))
    rev.set_defaults(func=keys_cmd("revoke"))


def _add_import(sub, noun: str) -> None:
    p = sub.add_parser(noun, help=f"{noun} register tools")
    acts = p.add_subparsers(dest=f"{noun}_command", parser_class=_Parser, metavar="ACTION")
    acts.required = True
    imp = acts.add_parser("import", help=f"load {noun} from a CSV file or an .xlsx workbook")
    imp.add_argument("file", help="FILE.csv or FILE.xlsx")
    _add_service_options(imp)
    imp.add_argument("--errors", default=None, help="write rejected rows to this CSV file")
    imp.add_argument("--sheet", default=None, help=".xlsx: worksheet name (default: the first)")
    if noun == "records":
        imp.add_argument("--time-zone", default=None, metavar="ZONE",
                         help=".xlsx: the zone spreadsheet date-times were written in (IANA "
                              "name such as Europe/London, UTC, or +01:00); without it such "
                              "cells are refused, never guessed")

    def run(a, parser):
        from .commands import imports
        from .operations import Monitor, PlanBook
        from .store import Store

        if getattr(a, "time_zone", None):
            from .commands.spreadsheets import parse_zone
            try:
                parse_zone(a.time_zone)
            except ValueError as exc:
                parser.error(f"argument --time-zone: {exc}")
        settings = _settings(a)
        store = Store(settings.db_path)
        store.migrate()
        monitor = Monitor(store=store, plans=PlanBook(settings.plans),
                          max_batch=max(settings.max_batch, imports.BATCH),
                          max_record_units=settings.max_record_units)
        try:
            if noun == "facilities":
                return imports.import_facilities(monitor, a.file, a.errors, sheet=a.sheet)
            return imports.import_records(monitor, a.file, a.errors, time_zone=a.time_zone,
                                          sheet=a.sheet)
        except (OSError, ValueError) as exc:
            parser.error(str(exc))

    imp.set_defaults(func=run)


def _add_backup(sub) -> None:
    p = sub.add_parser("backup", help="copy the live database now (SQLite online backup)")
    p.add_argument("--out", required=True, help="file to write")
    _add_service_options(p)
    r = sub.add_parser("restore", help="check a backup and bring it back into --db "
                                       "(stop the service first)")
    r.add_argument("file")
    _add_service_options(r)

    def do_backup(a, parser):
        from .jobs.backup import BackupError, backup_to
        db = _existing_db(a, parser)
        try:
            out = backup_to(db, Path(a.out))
        except (BackupError, OSError) as exc:
            parser.error(str(exc))
        print(f"backup of {db} written to {out} (integrity check ok)")
        return 0

    def do_restore(a, parser):
        from .jobs.backup import BackupError, restore
        settings = _settings(a)
        try:
            version = restore(Path(a.file), settings.db_path)
        except (BackupError, OSError) as exc:
            parser.error(str(exc))
        print(f"restored {a.file} into {settings.db_path} (schema version {version}, "
              "integrity check ok)")
        return 0

    p.set_defaults(func=do_backup)
    r.set_defaults(func=do_restore)


def _add_casefile(sub) -> None:
    p = sub.add_parser("casefile", help="write the case file of a decided cycle (.pdf or .json), "
                                        "or --check one against the database")
    p.add_argument("facility_id", nargs="?")
    p.add_argument("--cycle", type=_unit_count, default=None,
                   help="cycle number (default: the current cycle)")
    p.add_argument("--out", default=None, help="FILE.pdf or FILE.json (needed to write one)")
    p.add_argument("--check", default=None, metavar="FILE.json",
                   help="confirm this JSON case file against the database (exit 0 or 1)")
    p.add_argument("--level", type=float, default=0.95, help="confidence level (default 0.95)")
    _add_service_options(p)

    def run(a, parser):
        import json as _json
        from .casefile import build_casefile
        from .errors import ServiceError
        from .store import Store
        if a.check is not None:
            if a.facility_id is not None or a.out is not None:
                parser.error("argument --check: give only the case file and --db")
            from .commands.casefile_check import run as check
            return check(Path(a.check), _existing_db(a, parser))
        if a.facility_id is None or a.out is None:
            parser.error("a facility id and --out FILE.pdf|FILE.json are needed to write a "
                         "case file (or --check FILE.json to confirm one)")
        out = Path(a.out)
        if out.suffix.lower() not in (".pdf", ".json"):
            parser.error(f"argument --out: must end in .pdf or .json, got {a.out!r}")
        if not 0 < a.level < 1:
            parser.error(f"argument --level: must lie strictly between 0 and 1, got {a.level}")
        db = _existing_db(a, parser)
        try:
            cf = build_casefile(Store(db), a.facility_id, a.cycle, a.level)
        except ServiceError as exc:
            parser.error(exc.detail)
        if out.suffix.lower() == ".json":
            out.write_text(_json.dumps(cf, indent=2), encoding="utf-8")
        else:
            from .casefile.pdf import render_pdf
            out.write_bytes(render_pdf(cf))
        print(f"case file of {a.facility_id} cycle {cf['cycle']} ({cf['decision']}) written to "
              f"{out}")
        return 0

    p.set_defaults(func=run)


def _add_verify(sub) -> None:
    p = sub.add_parser("verify", help="replay every cycle and compare with the stored states; "
                                      "check the tamper-evident trail")
    _add_service_options(p)

    def run(a, parser):
        from .commands.verify import run as verify
        return verify(_existing_db(a, parser))

    p.set_defaults(func=run)


def _add_export(sub) -> None:
    p = sub.add_parser("export", help="write facilities, a cycle's records, alerts or the "
                                      "action log as CSV")
    p.add_argument("kind", choices=("facilities", "records", "alerts", "actions"))
    p.add_argument("--facility", default=None,
                   help="facility id (needed for records; a filter for alerts and actions)")
    p.add_argument("--cycle", type=_unit_count, default=None,
                   help="cycle number (records: default the current one; actions: a filter)")
    p.add_argument("--state", choices=("open", "acknowledged"), default=None,
                   help="alerts in this state only")
    p.add_argument("--out", default=None, help="CSV file to write (default: standard output)")
    _add_service_options(p)

    def run(a, parser):
        if a.kind == "records" and not a.facility:
            parser.error("argument --facility: needed to export records")
        if a.out and not Path(a.out).resolve().parent.is_dir():
            parser.error(f"argument --out: folder {str(Path(a.out).resolve().parent)!r} does "
                         "not exist")
        db = _existing_db(a, parser)
        from .commands.export import export
        rows, error = export(_settings(a), db, a.kind, a.out, a.facility, a.cycle, a.state)
        if error:
            parser.error(error)
        if a.out:
            print(f"{rows} {a.kind} row(s) written to {a.out}")
        return 0

    p.set_defaults(func=run)


def _add_draw(sub) -> None:
    p = sub.add_parser("draw", help="recompute a verifiable random draw (RFC 3797) offline")
    acts = p.add_subparsers(dest="draw_command", parser_class=_Parser, metavar="ACTION")
    acts.required = True
    v = acts.add_parser("verify", help="print the ordered draw from a frame file and a seed")
    v.add_argument("--frame", required=True, help="frame file: one unit ref per line, or CSV "
                                                  "with a unit_ref column")
    v.add_argument("--seed", required=True, help="the public seed, e.g. '9319 / 2 5 8 10 12'")
    v.add_argument("--size", type=_unit_count, required=True, help="units drawn")
    v.add_argument("--json", action="store_true", help="print one JSON object")
    k = acts.add_parser("pick", help="print the bare RFC 3797 selections of a key string")
    k.add_argument("--key", required=True, help="the key string, e.g. '9319./2.5.8.10.12./'")
    k.add_argument("--pool", type=_unit_count, required=True, help="number of items")
    k.add_argument("--size", type=_unit_count, required=True, help="selections to make")

    def run(a, parser):
        from .commands import draw as d
        from .selection import SelectionInputError
        try:
            if a.draw_command == "verify":
                return d.verify(a.frame, a.seed, a.size, a.json)
            return d.bare_pick(a.key, a.pool, a.size)
        except SelectionInputError as exc:
            parser.error(f"argument --{exc.field if exc.field != 'file' else 'frame'}: {exc}")
        except (OSError, UnicodeDecodeError) as exc:
            parser.error(f"argument --frame: {exc}")

    v.set_defaults(func=run)
    k.set_defaults(func=run)


def _whole(text: str) -> int:
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None


def _add_program(sub) -> None:
    p = sub.add_parser("program", help="the audit program: register forecast, this week's visits")
    acts = p.add_subparsers(dest="program_command", parser_class=_Parser, metavar="ACTION")
    acts.required = True
    fc = acts.add_parser("forecast", help="exact figures of every open cycle and their sums")
    fc.add_argument("--budget", type=_whole, default=None,
                    help="audits a week: add the weeks to decide 50 %% and 90 %% of the cycles")
    fc.add_argument("--runs", type=_whole, default=200, help="simulation runs (default 200)")
    fc.add_argument("--seed", type=_whole, default=20260415, help="simulation seed")
    fc.add_argument("--json", action="store_true", help="print one JSON object")
    vs = acts.add_parser("visits", help="facilities to visit this week under a budget")
    vs.add_argument("--budget", type=_whole, required=True, help="audits available this week")
    vs.add_argument("--per-visit", type=_whole, default=20, help="most units at one facility")
    vs.add_argument("--format", choices=("text", "json", "csv"), default="text")
    for q in (fc, vs):
        q.add_argument("--region", default=None, help="limit to one region")
        _add_service_options(q)

    def run(a, parser):
        from .commands import program
        a.settings = _settings(a)
        return program.run(a.program_command, a, parser)

    fc.set_defaults(func=run)
    vs.set_defaults(func=run)


def _add_frames(sub) -> None:
    p = sub.add_parser("frames", help="frames: the units a facility passed in a period")
    acts = p.add_subparsers(dest="frames_command", parser_class=_Parser, metavar="ACTION")
    acts.required = True
    imp = acts.add_parser("import", help="register a frame from a file: one unit ref per line, "
                                         "or CSV with a unit_ref column")
    imp.add_argument("file")
    imp.add_argument("--facility", required=True, help="facility id")
    imp.add_argument("--label", required=True, help="e.g. 'week 2026-W48'")
    imp.add_argument("--period-start", required=True, help="first day, YYYY-MM-DD")
    imp.add_argument("--period-end", required=True, help="last day, YYYY-MM-DD")
    _add_service_options(imp)

    def run(a, parser):
        from .commands.frames import FrameImportError, import_frame
        from .errors import ServiceError
        from .operations import Monitor, PlanBook
        from .store import Store
        settings = _settings(a)
        if not settings.db_path.exists():
            parser.error(f"argument --db: {settings.db_path} does not exist")
        store = Store(settings.db_path)
        store.migrate()
        monitor = Monitor(store=store, plans=PlanBook(settings.plans))
        try:
            return import_frame(monitor, a.file, a.facility, a.label, a.period_start,
                                a.period_end)
        except FrameImportError as exc:
            name = "file" if exc.option == "file" else f"--{exc.option}"
            parser.error(f"argument {name}: {exc}")
        except ServiceError as exc:      # e.g. an unknown facility
            parser.error(f"argument --facility: {exc.detail}")

    imp.set_defaults(func=run)


def build_parser() -> _Parser:
    parser = _Parser(prog="seqaudit", description="Sequential audit monitor (SPRT).")
    sub = parser.add_subparsers(dest="command", parser_class=_Parser, metavar="COMMAND")
    sub.required = True
    _add_plan(sub)
    _add_plans(sub)
    _add_serve(sub)
    _add_demo(sub)
    _add_keys(sub)
    _add_import(sub, "facilities")
    _add_import(sub, "records")
    _add_backup(sub)
    _add_casefile(sub)
    _add_verify(sub)
    _add_export(sub)
    _add_program(sub)
    _add_draw(sub)
    _add_frames(sub)
    return parser


def _leaf_parser(parser: argparse.ArgumentParser, argv: list[str]) -> argparse.ArgumentParser:
    """The (sub)parser that owns the chosen command, so errors carry its name."""
    current = parser
    for word in argv:
        actions = [a for a in current._actions if isinstance(a, argparse._SubParsersAction)]
        if not actions or word not in actions[0].choices:
            if actions:
                continue
            break
        current = actions[0].choices[word]
    return current


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args, _leaf_parser(parser, argv))
    except BrokenPipeError:  # e.g. piped into head
        return 0
    except SchemaTooNew as exc:
        print(f"seqaudit: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
