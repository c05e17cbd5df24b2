"""The workbench's watch-chart fields: the chart's figures or a message saying what is wrong."""
from __future__ import annotations

from ..stats import PlanInputError
from ..stats.watch import design_watch
from ..watching import DEFAULT_AUDITS_PER_YEAR


def watch_figures(values: dict, arl0_text: str, p1_text: str) -> tuple[dict | None, str | None]:
    """(watch JSON or None, error or None) for the workbench form."""
    if not arl0_text.strip():
        return None, None
    try:
        arl0 = float(arl0_text)
        p1 = float(p1_text) if p1_text.strip() else values["p1"]
    except ValueError:
        return None, "The watch ARL and rate must be numbers, e.g. 2000 and 0.08."
    try:
        return design_watch(values["p0"], p1, arl0, DEFAULT_AUDITS_PER_YEAR).to_dict(), None
    except PlanInputError as exc:
        return None, f"watch {exc.argument}: {exc}"
