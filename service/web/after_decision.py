"""What the facility page shows after a decision: the watch chart (and, later, findings)."""
from __future__ import annotations

from .watch_svg import watch_chart


def after_decision_context(m, facility_id: str, cyc: dict) -> dict:
    """Template values for the part of the facility page after the decision."""
    out = {"watch": None, "watch_svg": None}
    path = m.store.watch_path(facility_id, cyc["cycle"]) if cyc.get("watch") else None
    if path is not None:
        points = [(p["units"], p["value"]) for p in path["points"]]
        signal = ((points[-1][0], points[-1][1]) if path["state"] == "signalled" and points
                  else None)
        out["watch"] = {**cyc["watch"], "points": path["points"]}
        out["watch_svg"] = watch_chart(points, path["t"], path["m"], signal)
    return out
