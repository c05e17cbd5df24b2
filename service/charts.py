"""Charts of a plan (matplotlib, no display needed)."""
from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from .cli import CHART_FORMATS  # noqa: E402
from .stats.design import DesignResult  # noqa: E402

#: Colour-blind-safe palette (Okabe and Ito, "Color Universal Design", 2008).
PALETTE = {"exact": "#0072B2", "approx": "#D55E00", "marker": "#009E73", "grey": "#555555"}


def plan_figure(result: DesignResult, mark_p: float | None = None):
    """OC and ASN curves, exact (solid) and Wald's approximation (dashed)."""
    pts = result.to_dict()["curve"]
    p = [c["p"] for c in pts]
    fig, (oc, asn) = plt.subplots(1, 2, figsize=(10, 4), constrained_layout=True)
    oc.plot(p, [c["p_flag"] for c in pts], color=PALETTE["exact"], label="exact")
    oc.plot(p, [c["wald_p_flag"] for c in pts], color=PALETTE["approx"], linestyle="--",
            label="Wald approximation")
    oc.set_xlabel("true rate of nonconforming passes")
    oc.set_ylabel("probability the facility is flagged")
    oc.set_title("Operating characteristic")
    asn.plot(p, [c["asn"] for c in pts], color=PALETTE["exact"], label="exact")
    asn.plot(p, [c["wald_asn"] if c["wald_asn"] is not None else float("nan") for c in pts],
             color=PALETTE["approx"], linestyle="--", label="Wald approximation")
    asn.set_xlabel("true rate of nonconforming passes")
    asn.set_ylabel("expected units audited to a decision")
    asn.set_title("Average sample number")
    for ax in (oc, asn):
        for value, name in ((result.plan.p0, "p0"), (result.plan.p1, "p1")):
            ax.axvline(value, color=PALETTE["grey"], linestyle=":", linewidth=1)
            ax.annotate(name, (value, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(3, -12), textcoords="offset points", color=PALETTE["grey"])
        if mark_p is not None:
            ax.axvline(mark_p, color=PALETTE["marker"], linewidth=1.5, label="estimate")
        ax.grid(alpha=0.3)
        ax.legend(loc="best", fontsize=8)
    return fig


def save_plan_chart(result: DesignResult, path: str | Path) -> Path:
    path = Path(path)
    if path.suffix.lower() not in CHART_FORMATS:
        raise ValueError(f"chart file must end in {', '.join(CHART_FORMATS)}, got {path.name}")
    fig = plan_figure(result)
    try:
        fig.savefig(path, dpi=120)
    finally:
        plt.close(fig)
    return path
