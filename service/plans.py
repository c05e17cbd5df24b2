"""Plans as written in the configuration file ([plans.NAME] tables)."""
from __future__ import annotations

import tomllib
from dataclasses import asdict, dataclass, replace
from pathlib import Path

from .stats import Recheck, check_rates
from .watching import WatchSpec, design_for, watch_from_table

PLAN_KEYS = {"p0", "p1", "alpha", "beta", "max_units", "cut_llr", "calibrate",
             "remonitor_after_days", "stale_after_days", "title", "require_draw", "watch",
             "visit_units", "sensitivity", "specificity"}


class ConfigError(ValueError):
    """The configuration file cannot be used; the message says where and why."""


@dataclass(frozen=True)
class PlanSpec:
    """One named plan from the configuration file."""

    name: str
    p0: float
    p1: float
    alpha: float
    beta: float
    max_units: int | None = None
    cut_llr: float = 0.0
    calibrate: bool = False
    title: str | None = None
    stale_after_days: float | None = None
    remonitor_after_days: float | None = None
    require_draw: bool = False      # only records of drawn units are evidence
    watch: WatchSpec | None = None      # [plans.NAME.watch]: chart after a clear
    visit_units: int = 1
    sensitivity: float = 1.0
    specificity: float = 1.0

    def design_args(self) -> dict:
        return {"p0": self.p0, "p1": self.p1, "alpha": self.alpha, "beta": self.beta,
                "max_units": self.max_units, "cut_llr": self.cut_llr,
                "calibrate": self.calibrate, "visit_units": self.visit_units,
                "sensitivity": self.sensitivity, "specificity": self.specificity}

    def to_dict(self) -> dict:
        return asdict(self)


def plan_from_table(name: str, table: dict, source: str = "config") -> PlanSpec:
    unknown = set(table) - PLAN_KEYS
    if unknown:
        raise ConfigError(f"{source}: [plans.{name}] has unknown key(s) "
                          f"{', '.join(sorted(unknown))}; allowed: {', '.join(sorted(PLAN_KEYS))}")
    missing = {"p0", "p1", "alpha", "beta"} - set(table)
    if missing:
        raise ConfigError(f"{source}: [plans.{name}] lacks {', '.join(sorted(missing))}")
    table = dict(table)
    watch = table.pop("watch", None)
    spec = PlanSpec(name=name, **table)
    try:
        check_rates(spec.p0, spec.p1, spec.alpha, spec.beta, spec.max_units, spec.cut_llr,
                    spec.visit_units)
        Recheck(spec.sensitivity, spec.specificity)
    except ValueError as exc:
        raise ConfigError(f"{source}: [plans.{name}]: {exc}") from None
    if watch is not None:
        try:
            spec = replace(spec, watch=watch_from_table(watch, f"{source}: [plans.{name}]"))
            design_for(spec.p0, spec.p1, spec.watch)   # refuse a chart that cannot be built
        except ValueError as exc:
            raise ConfigError(str(exc) if str(exc).startswith(source) else
                              f"{source}: [plans.{name}.watch]: {exc}") from None
    if not isinstance(spec.calibrate, bool):
        raise ConfigError(f"{source}: [plans.{name}]: calibrate must be true or false")
    if not isinstance(spec.require_draw, bool):
        raise ConfigError(f"{source}: [plans.{name}]: require_draw must be true or false")
    return spec


def read_toml(path: Path) -> dict:
    """The TOML file as a dict, or ConfigError saying what is wrong with it."""
    try:
        return tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"configuration file {path} does not exist") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None


def load_plans(path: str | Path) -> dict[str, PlanSpec]:
    """Read every [plans.NAME] table of a TOML file, checking each."""
    path = Path(path)
    data = read_toml(path)
    tables = data.get("plans", {})
    if not isinstance(tables, dict):
        raise ConfigError(f"{path}: 'plans' must be a table of [plans.NAME] tables")
    return {name: plan_from_table(name, t, str(path)) for name, t in tables.items()}
