"""Jobs for the heavy pool (:mod:`service.heavy`): module-level functions whose arguments
and results are plain picklable values. They run in the pool's worker processes, which
import this module once (through the fork server) and open the database read-only-in-effect
by path (a WAL reader beside the server's writer)."""
from __future__ import annotations

from pathlib import Path

from .casefile import build_casefile
from .casefile.pdf import render_pdf
from .stats import design
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


def design_job(p0: float, p1: float, alpha: float, beta: float, max_units: int | None,
               calibrate: bool) -> dict:
    """A plan's design (boundaries, exact OC and ASN; calibration if asked) as its dict."""
    return design(p0=p0, p1=p1, alpha=alpha, beta=beta, max_units=max_units,
                  calibrate=calibrate).to_dict()


def register_design_job(values: dict, size_text: str, false_flags_text: str,
                        cap: int | None, calibrate: bool) -> tuple[dict, dict]:
    """The workbench's register fields: the design at the per-facility alpha as its dict,
    and the register block (see :func:`service.program.register_from_form`)."""
    from .program import register_from_form
    res, register = register_from_form(values, size_text, false_flags_text, cap, calibrate)
    return res.to_dict(), register


def forecast_job(db_path: str, region: str | None, budget: int | None, runs: int,
                 seed: int) -> dict:
    """The register forecast (see :func:`service.program_ops.forecast`)."""
    from . import program_ops
    return program_ops.forecast(_store(db_path), region=region, budget=budget, runs=runs,
                                seed=seed)
