"""The watch chart of a cleared cycle as an inline SVG (same frame and palette as the LLR path)."""
from __future__ import annotations

from html import escape

from markupsafe import Markup

from .svg import COLOURS, INK, _f, _Frame


def watch_chart(points: list[tuple[int, int]], t: int, m: int,
                signal: tuple[int, int] | None) -> Markup:
    """Chart value S after each record charted (x: units watched) against the limit t."""
    pts = [(0, 0)] + points
    fr = _Frame([p[0] for p in pts] + [1], [p[1] for p in pts] + [0, t])
    body = [fr.axes("units audited since the clear (in order of receipt)",
                    "chart value S", yfmt="{:.0f}")]
    body.append(f'<line x1="{fr.left}" y1="{_f(fr.y(t))}" x2="{fr.w - fr.right}" '
                f'y2="{_f(fr.y(t))}" stroke="{COLOURS["flagged"]}" stroke-width="2" '
                f'stroke-dasharray="6 4"/><text x="{fr.w - fr.right - 4}" '
                f'y="{_f(fr.y(t) - 5)}" font-size="11" text-anchor="end" '
                f'fill="{COLOURS["flagged"]}">signal limit t = {t}</text>')
    if len(pts) > 1:
        line = " ".join(f"{_f(fr.x(x))},{_f(fr.y(y))}" for x, y in pts)
        body.append(f'<polyline points="{line}" fill="none" stroke="{COLOURS["cleared"]}" '
                    f'stroke-width="2"/>')
    if signal:
        units, value = signal
        body.append(f'<circle cx="{_f(fr.x(units))}" cy="{_f(fr.y(value))}" r="7" '
                    f'fill="{COLOURS["flagged"]}" stroke="{INK}" stroke-width="1.5"/>'
                    f'<text x="{_f(fr.x(units) - 10)}" y="{_f(fr.y(value) - 10)}" '
                    f'font-size="12" text-anchor="end" fill="{INK}">signal after {units} '
                    f'units</text>')
    label = (f"Watch chart after the clear: S = max(0, S + {m} X - 1) over "
             f"{pts[-1][0]} units, limit {t}" + (f"; signal after {signal[0]} units"
                                                 if signal else "; no signal"))
    return fr.svg("".join(body), label)
