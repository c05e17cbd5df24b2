"""The software version, as installed (pyproject.toml's ``version``)."""
from __future__ import annotations

from functools import lru_cache


@lru_cache(maxsize=1)
def software_version() -> str:
    from importlib.metadata import PackageNotFoundError, version
    try:
        return version("seqaudit")
    except PackageNotFoundError:   # run from a checkout that was never installed
        return "unknown"
