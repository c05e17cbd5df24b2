"""Service settings: config file, then SEQAUDIT_* environment, then explicit overrides.

Nothing reads settings at import time; `create_app(settings)` and the CLI pass
a :class:`Settings` object down.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from .heavy import HeavySettings
from .plans import ConfigError, PlanSpec, load_plans, read_toml

PROJECT_ROOT = Path(__file__).resolve().parent.parent
DEFAULT_CONFIG = PROJECT_ROOT / "config" / "seqaudit.toml"
ENV_PREFIX = "SEQAUDIT_"


@dataclass(frozen=True)
class ScheduleSettings:
    """[schedule]: the calendar jobs (all times UTC)."""

    enabled: bool = True
    delivery_interval_s: float = 5.0
    stale_check_s: float = 300.0
    stale_after_days: float | None = 14.0     # a plan's own stale_after_days wins
    remonitor_check_s: float = 300.0
    backup_cron: str | None = None           # crontab fields: minute hour day month weekday
    backup_dir: Path = PROJECT_ROOT / "data" / "backups"
    backup_keep: int = 7
    lease_ttl_s: float = 120.0


@dataclass(frozen=True)
class DeliverySettings:
    """[delivery]: webhook delivery with exponential backoff and jitter."""

    timeout_s: float = 10.0          # the whole attempt: connect, send, read the whole answer
    first_retry_s: float = 30.0      # the first retry comes within this (jittered down to half)
    max_delay_s: float = 3600.0
    give_up_after_s: float = 86_400.0
    batch: int = 50
    parallel: int = 8                # subscriptions served at once (each one in order)


@dataclass(frozen=True)
class Settings:
    """Everything the service needs to know to run."""

    db_path: Path = PROJECT_ROOT / "data" / "seqaudit.db"
    config_path: Path = DEFAULT_CONFIG
    host: str = "127.0.0.1"
    port: int = 8000
    workers: int = 1
    max_batch: int = 1000
    max_body_bytes: int = 2_000_000
    rate_per_s: float = 200.0                # per API key and worker; 0 turns the limit off
    rate_burst: float = 1000.0
    future_tolerance_s: float = 86_400.0     # observed_at at most this far ahead of the clock
    max_record_units: int = 10_000           # units in one record (at most 100,000)
    docs_public: bool = True                 # /docs, /redoc, /openapi.json without a key
    request_read_timeout_s: float = 30.0     # a request's headers and body must arrive in this
    require_draw: bool = False               # every plan requires draws, whatever its table says
    plans: dict[str, PlanSpec] = field(default_factory=dict)
    schedule: ScheduleSettings = field(default_factory=ScheduleSettings)
    delivery: DeliverySettings = field(default_factory=DeliverySettings)
    heavy: HeavySettings = field(default_factory=HeavySettings)

    def with_overrides(self, **values) -> "Settings":
        return replace(self, **{k: v for k, v in values.items() if v is not None})


_SERVICE_KEYS = {"db": ("db_path", Path), "host": ("host", str), "port": ("port", int),
                 "workers": ("workers", int), "max_batch": ("max_batch", int),
                 "max_body_bytes": ("max_body_bytes", int),
                 "future_tolerance_s": ("future_tolerance_s", float),
                 "rate_per_s": ("rate_per_s", float), "rate_burst": ("rate_burst", float),
                 "max_record_units": ("max_record_units", int),
                 "docs_public": ("docs_public", bool),
                 "request_read_timeout_s": ("request_read_timeout_s", float),
                 "require_draw": ("require_draw", bool)}

#: The schema's own bound on ``units``; max_record_units may not exceed it.
UNITS_HARD_LIMIT = 100_000


_TRUE, _FALSE = {"true", "1", "yes", "on"}, {"false", "0", "no", "off"}


def _coerce(name: str, kind, value, where: str):
    if kind is bool:
        if isinstance(value, bool):
            return value
        word = str(value).strip().lower()
        if word not in _TRUE | _FALSE:
            raise ConfigError(f"{where}: {name} must be true or false, got {value!r}")
        return word in _TRUE
    try:
        out = kind(value)
    except (TypeError, ValueError):
        raise ConfigError(f"{where}: {name} must be a {kind.__name__}, got {value!r}") from None
    if kind is float and out < 0:
        raise ConfigError(f"{where}: {name} must be >= 0, got {value!r}")
    if kind is int and out < 1:
        raise ConfigError(f"{where}: {name} must be at least 1, got {value!r}")
    return out


def _section(data: dict, name: str, cls, path: Path):
    """A [name] table as a dataclass, checking key names and types."""
    table = data.get(name, {})
    known = {f.name: f for f in fields(cls)}
    unknown = set(table) - set(known)
    if unknown:
        raise ConfigError(f"{path}: [{name}] has unknown key(s) {', '.join(sorted(unknown))}; "
                          f"allowed: {', '.join(sorted(known))}")
    values = {}
    for key, raw in table.items():
        default = getattr(cls(), key)
        if isinstance(default, bool):
            if not isinstance(raw, bool):
                raise ConfigError(f"{path}: [{name}] {key} must be true or false")
            values[key] = raw
        elif isinstance(default, Path):
            p = Path(raw)
            values[key] = p if p.is_absolute() else (path.parent.parent / p).resolve()
        elif isinstance(default, (int, float)) and not isinstance(default, bool):
            if isinstance(raw, bool) or not isinstance(raw, (int, float)) or raw < 0:
                raise ConfigError(f"{path}: [{name}] {key} must be a number >= 0, got {raw!r}")
            values[key] = type(default)(raw)
        else:  # optional strings and numbers
            values[key] = raw
    return cls(**values)


def config_file(config_path: str | Path | None = None, environ=None) -> Path:
    """The configuration file: the one given, else SEQAUDIT_CONFIG, else the project's."""
    env = os.environ if environ is None else environ
    return Path(config_path or env.get(ENV_PREFIX + "CONFIG") or DEFAULT_CONFIG)


def load_settings(config_path: str | Path | None = None, environ=None, **overrides) -> Settings:
    """Build settings from the config file, the environment and explicit overrides."""
    env = os.environ if environ is None else environ
    path = config_file(config_path, env)
    data = read_toml(path)
    values: dict = {"config_path": path, "plans": load_plans(path)}
    section = data.get("service", {})
    unknown = set(section) - set(_SERVICE_KEYS)
    if unknown:
        raise ConfigError(f"{path}: [service] has unknown key(s) {', '.join(sorted(unknown))}")
    for key, raw in section.items():
        name, kind = _SERVICE_KEYS[key]
        value = _coerce(key, kind, raw, f"{path} [service]")
        if name == "db_path" and not Path(value).is_absolute():
            value = (path.parent.parent / value).resolve()  # relative to the project root
        values[name] = value
    for key, (name, kind) in _SERVICE_KEYS.items():
        raw = env.get(ENV_PREFIX + key.upper())
        if raw not in (None, ""):
            values[name] = _coerce(ENV_PREFIX + key.upper(), kind, raw, "environment")
    values["schedule"] = _section(data, "schedule", ScheduleSettings, path)
    values["delivery"] = _section(data, "delivery", DeliverySettings, path)
    values["heavy"] = _section(data, "heavy", HeavySettings, path)
    if values.get("max_record_units", 0) > UNITS_HARD_LIMIT:
        raise ConfigError(f"max_record_units may be at most {UNITS_HARD_LIMIT}, got "
                          f"{values['max_record_units']}")
    if values.get("require_draw"):
        values["plans"] = draws_required(values["plans"])
    settings = Settings(**values)
    known = {f.name for f in fields(Settings)}
    return settings.with_overrides(**{k: v for k, v in overrides.items() if k in known})


def draws_required(plans: dict[str, PlanSpec]) -> dict[str, PlanSpec]:
    """The plans, each with ``require_draw`` set: only records of drawn units are evidence."""
    return {name: replace(spec, require_draw=True) for name, spec in plans.items()}
