"""The watch chart of a cleared cycle as an inline SVG (same frame and palette as the LLR path)."""
from __future__ import annotations

from markupsafe import Markup

from .svg import COLOURS, _f, _Frame


def watch_chart(points: list[tuple[int, int]], t: int, m: int,
                signal: tuple[int, int] | None) -> Markup:
    """Chart value S after each record charted (x: units watched) against the limit t."""
    pts = [(0, 0)] + points
    fr = _Frame([p[0] for p in pts] + [1], [p[1] for p in pts] + [0, t])
    body = [fr.axes("units audited since the clear (in order of receipt)",
                    "chart value S", yfmt="{:.0f}")]
    body.append(fr.level(t, COLOURS["flagged"], f"signal limit t = {t}"))
    if len(pts) > 1:
        line = " ".join(f"{_f(fr.x(x))},{_f(fr.y(y))}" for x, y in pts)
        body.append(f'<polyline points="{line}" fill="none" stroke="{COLOURS["cleared"]}" '
                    f'stroke-width="2"/>')
    if signal:
        units, value = signal
        body.append(fr.marker(units, value, COLOURS["flagged"], f"signal after {units} units"))
    label = (f"Watch chart after the clear: S = max(0, S + {m} X - 1) over "
             f"{pts[-1][0]} units, limit {t}" + (f"; signal after {signal[0]} units"
                                                 if signal else "; no signal"))
    return fr.svg("".join(body), label)
