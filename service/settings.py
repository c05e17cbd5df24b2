"""Service settings: config file, then SEQAUDIT_* environment, then explicit overrides.

Nothing reads settings at import time; `create_app(settings)` and the CLI pass
a :class:`Settings` object down.
"""
from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from .plans import ConfigError, PlanSpec, load_plans

PROJECT_ROOT = Path(__file__).resolve().parent.parent
DEFAULT_CONFIG = PROJECT_ROOT / "config" / "seqaudit.toml"
ENV_PREFIX = "SEQAUDIT_"


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
    future_tolerance_s: float = 86_400.0     # observed_at at most this far ahead of the clock
    plans: dict[str, PlanSpec] = field(default_factory=dict)

    def with_overrides(self, **values) -> "Settings":
        return replace(self, **{k: v for k, v in values.items() if v is not None})


_SERVICE_KEYS = {"db": ("db_path", Path), "host": ("host", str), "port": ("port", int),
                 "workers": ("workers", int), "max_batch": ("max_batch", int),
                 "max_body_bytes": ("max_body_bytes", int),
                 "future_tolerance_s": ("future_tolerance_s", float)}


def _coerce(name: str, kind, value, where: str):
    try:
        out = kind(value)
    except (TypeError, ValueError):
        raise ConfigError(f"{where}: {name} must be a {kind.__name__}, got {value!r}") from None
    if kind is int and out < 1:
        raise ConfigError(f"{where}: {name} must be at least 1, got {value!r}")
    return out


def load_settings(config_path: str | Path | None = None, environ=None, **overrides) -> Settings:
    """Build settings from the config file, the environment and explicit overrides."""
    env = os.environ if environ is None else environ
    path = Path(config_path or env.get(ENV_PREFIX + "CONFIG") or DEFAULT_CONFIG)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"configuration file {path} does not exist") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
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
    settings = Settings(**values)
    known = {f.name for f in fields(Settings)}
    return settings.with_overrides(**{k: v for k, v in overrides.items() if k in known})
