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
    return curves_figure(result.to_dict()["curve"], result.plan.p0, result.plan.p1, mark_p)


def curves_figure(pts: list[dict], p0: float, p1: float, mark_p: float | None = None,
                  mark_label: str = "estimate",
                  interval: tuple[float, float, float] | None = None):
    """OC and ASN curves from ``design(...).to_dict()["curve"]`` points.

    ``interval``: (low, high, level) of a confidence interval, shaded; the rate axis is
    widened so that p0, p1, the mark and the whole interval are on it.
    """
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
        for value, name in ((p0, "p0"), (p1, "p1")):
            ax.axvline(value, color=PALETTE["grey"], linestyle=":", linewidth=1)
            ax.annotate(name, (value, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(3, -12), textcoords="offset points", color=PALETTE["grey"])
        if mark_p is not None:
            ax.axvline(mark_p, color=PALETTE["marker"], linewidth=1.5, label=mark_label)
        if interval is not None:
            low, high, level = interval
            ax.axvspan(low, high, color=PALETTE["marker"], alpha=0.15,
                       label=f"{100 * level:g} % interval")
        right = max([p[-1], p1, *(v for v in (mark_p,) if v is not None),
                     *((interval[1],) if interval is not None else ())])
        ax.set_xlim(0.0, min(1.0, right * 1.05))
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


def path_figure(casefile: dict):
    """LLR after each record against both boundaries; decision marked; voids shown struck."""
    recs = casefile["records"]
    snap = casefile["plan"]
    fig, ax = plt.subplots(figsize=(10, 4.2), constrained_layout=True)
    units, xs, ys = 0, [0], [0.0]
    void_x, post_x = [], []
    for r in recs:
        if r["void"]:
            void_x.append(units)
            continue
        if r["evidence"]:
            units += r["units"]
            xs.append(units)
            ys.append(r["llr_after"])
        else:
            post_x.append(units)
    ax.step(xs, ys, where="post", color=PALETTE["exact"], linewidth=1.6,
            label="LLR after each record")
    ax.plot(xs, ys, "o", color=PALETTE["exact"], markersize=2.5)
    ax.axhline(snap["upper_llr"], color=PALETTE["approx"], linestyle="--",
               label=f"flag boundary (LLR {snap['upper_llr']:.3f})")
    ax.axhline(snap["lower_llr"], color=PALETTE["marker"], linestyle="--",
               label=f"clear boundary (LLR {snap['lower_llr']:.3f})")
    if snap.get("max_units"):
        ax.axvline(snap["max_units"], color=PALETTE["grey"], linestyle=":",
                   label=f"cap ({snap['max_units']} units)")
    if casefile.get("decided_after_units") is not None:
        ax.plot([casefile["decided_after_units"]], [casefile["llr"]], marker="*", markersize=16,
                color=PALETTE["approx"] if casefile["decision"] == "flagged" else
                PALETTE["marker"], markeredgecolor="black", linestyle="none",
                label=f"{casefile['decision']} after {casefile['decided_after_units']} units")
    if void_x:
        ax.plot(void_x, [snap["lower_llr"]] * len(void_x), marker="x", color=PALETTE["grey"],
                linestyle="none", markersize=8, label="void record (struck, not evidence)")
    ax.set_xlabel("units audited in this cycle (evidence, in order of receipt)")
    ax.set_ylabel("log-likelihood ratio (LLR)")
    ax.set_title("Path of the evidence against the boundaries")
    ax.grid(alpha=0.3)
    ax.legend(loc="best", fontsize=8)
    return fig


def figure_png(fig, dpi: int = 130) -> bytes:
    import io
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format="png", dpi=dpi)
    finally:
        plt.close(fig)
    return buf.getvalue()
