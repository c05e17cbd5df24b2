"""Jobs for the heavy pool (:mod:`service.heavy`): module-level functions whose arguments
and results are plain picklable values. They run in the pool's worker processes, which
import this module once (through the fork server) and open the database read-only-in-effect
by path (a WAL reader beside the server's writer)."""
from __future__ import annotations

from pathlib import Path

from .casefile import build_casefile
from .casefile.pdf import render_pdf
from .store import Store

_STORES: dict[str, Store] = {}


def _store(db_path: str) -> Store:
    store = _STORES.get(db_path)
    if store is None:
        store = _STORES[db_path] = Store(Path(db_path))
    return store


def casefile_json_job(db_path: str, facility_id: str, cycle: int, level: float) -> dict:
    """The case file of a decided cycle as a dict (see :func:`build_casefile`)."""
    return build_casefile(_store(db_path), facility_id, cycle, level)


def casefile_pdf_job(db_path: str, facility_id: str, cycle: int, level: float) -> bytes:
    """The case file of a decided cycle as PDF bytes."""
    return render_pdf(build_casefile(_store(db_path), facility_id, cycle, level))


def plan_form_job(form: dict) -> tuple[dict | None, str | None, dict | None]:
    """The workbench's plan (with the register fields, at the register's alpha) from the
    form's text: see :func:`service.web.workbench_form.compute_plan`."""
    from .web.workbench_form import compute_plan
    return compute_plan(form)


def forecast_job(db_path: str, region: str | None, budget: int | None, runs: int,
                 seed: int) -> dict:
    """The register forecast (see :func:`service.program_ops.forecast`)."""
    from . import program_ops
    return program_ops.forecast(_store(db_path), region=region, budget=budget, runs=runs,
                                seed=seed)
