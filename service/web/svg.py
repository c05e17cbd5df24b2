"""Small inline SVG charts (no script, no external assets; presentation by attributes so the
strict Content-Security-Policy holds)."""
from __future__ import annotations

from html import escape

from markupsafe import Markup

INK, GRID = "#2B3440", "#D5DBE1"
COLOURS = {"monitoring": "#0072B2", "flagged": "#D55E00", "cleared": "#009E73",
           "closed": "#6B6B6B", "approx": "#CC79A7", "mark": "#E69F00"}


def _f(x: float) -> str:
    return f"{x:.2f}"


def llr_bar(llr: float, lower: float, upper: float, status: str, width: int = 120,
            height: int = 14) -> Markup:
    """Where the LLR stands between the clear (left) and flag (right) boundaries."""
    span = upper - lower
    frac = min(max((llr - lower) / span, 0.0), 1.0) if span > 0 else 0.5
    zero = min(max((0 - lower) / span, 0.0), 1.0) if span > 0 else 0.5
    x = 2 + frac * (width - 4)
    label = (f"LLR {llr:.3f}: {100 * frac:.0f}% of the way from the clear boundary "
             f"({lower:.3f}) to the flag boundary ({upper:.3f})")
    return Markup(
        f'<svg class="llrbar" width="{width}" height="{height}" viewBox="0 0 {width} {height}" '
        f'role="img" aria-label="{escape(label)}"><title>{escape(label)}</title>'
        f'<rect x="1" y="4" width="{width - 2}" height="{height - 8}" rx="3" fill="#EEF1F4" '
        f'stroke="#9AA5B1" stroke-width="1"/>'
        f'<line x1="{_f(2 + zero * (width - 4))}" y1="2" x2="{_f(2 + zero * (width - 4))}" '
        f'y2="{height - 2}" stroke="#9AA5B1" stroke-width="1"/>'
        f'<rect x="{_f(x - 3)}" y="1" width="6" height="{height - 2}" rx="2" '
        f'fill="{COLOURS.get(status, INK)}" stroke="{INK}" stroke-width="0.8"/></svg>')


def nice_ticks(lo: float, hi: float, count: int = 5, whole: bool = False) -> list[float]:
    """Round tick values within [lo, hi]: steps of 1, 2 or 5 times a power of ten, about
    ``count`` of them (Heckbert, "Nice numbers for graph labels", Graphics Gems, 1990);
    ``whole``: steps of at least 1, for counts such as units."""
    import math
    span = hi - lo
    if not span > 0:
        return [lo]
    raw = span / count
    power = 10 ** math.floor(math.log10(raw))
    ratio = raw / power
    step = power * (1 if ratio < 1.5 else 2 if ratio < 3 else 5 if ratio < 7 else 10)
    if whole:
        step = max(1.0, round(step))
    first = math.ceil(lo / step - 1e-9) * step
    ticks, k = [], 0
    while first + k * step <= hi + 1e-9 * step:
        ticks.append(round(first + k * step, 10))
        k += 1
    return ticks


def tick_text(value: float, step: float) -> str:
    """A tick value with as many decimals as its step needs (0.5 -> 1 decimal)."""
    import math
    decimals = max(0, -math.floor(math.log10(step) + 1e-9)) if step < 1 else 0
    text = f"{value:.{decimals}f}"
    return "0" if text.strip("-0.") == "" else text


class _Frame:
    def __init__(self, xs, ys, width=720, height=300, pad=(56, 18, 24, 44)):
        self.w, self.h = width, height
        self.left, self.right, self.top, self.bottom = pad
        self.x0, self.x1 = min(xs), max(xs)
        self.y0, self.y1 = min(ys), max(ys)
        if self.x1 == self.x0:
            self.x1 = self.x0 + 1
        if self.y1 == self.y0:
            self.y1 = self.y0 + 1
        margin = 0.06 * (self.y1 - self.y0)
        self.y0, self.y1 = self.y0 - margin, self.y1 + margin

    def x(self, v):
        return self.left + (v - self.x0) / (self.x1 - self.x0) * (self.w - self.left - self.right)

    def y(self, v):
        return self.top + (self.y1 - v) / (self.y1 - self.y0) * (self.h - self.top - self.bottom)

    def axes(self, xlabel: str, ylabel: str, xticks=5, yticks=5, xwhole=False, xfmt=None,
             yfmt=None):
        """Grid and tick labels at round values (whole numbers on the x axis if ``xwhole``).

        ``xfmt``/``yfmt`` are accepted from older callers and not used: a tick's text has as
        many decimals as the tick step needs."""
        parts = []
        xs = nice_ticks(self.x0, self.x1, xticks, whole=xwhole)
        xstep = xs[1] - xs[0] if len(xs) > 1 else 1.0
        for v in xs:
            X = self.x(v)
            parts.append(f'<line x1="{_f(X)}" y1="{self.top}" x2="{_f(X)}" '
                         f'y2="{self.h - self.bottom}" stroke="{GRID}"/>'
                         f'<text x="{_f(X)}" y="{self.h - self.bottom + 14}" font-size="11" '
                         f'text-anchor="middle" fill="{INK}" class="tick-x">'
                         f'{escape(tick_text(v, xstep))}</text>')
        ys = nice_ticks(self.y0, self.y1, yticks)
        ystep = ys[1] - ys[0] if len(ys) > 1 else 1.0
        for v in ys:
            Y = self.y(v)
            parts.append(f'<line x1="{self.left}" y1="{_f(Y)}" x2="{self.w - self.right}" '
                         f'y2="{_f(Y)}" stroke="{GRID}"/>'
                         f'<text x="{self.left - 6}" y="{_f(Y + 4)}" font-size="11" '
                         f'text-anchor="end" fill="{INK}" class="tick-y">'
                         f'{escape(tick_text(v, ystep))}</text>')
        parts.append(f'<text x="{(self.left + self.w - self.right) / 2}" y="{self.h - 6}" '
                     f'font-size="12" text-anchor="middle" fill="{INK}">{escape(xlabel)}</text>'
                     f'<text x="14" y="{(self.top + self.h - self.bottom) / 2}" font-size="12" '
                     f'text-anchor="middle" fill="{INK}" transform="rotate(-90 14 '
                     f'{(self.top + self.h - self.bottom) / 2})">{escape(ylabel)}</text>')
        return "".join(parts)

    def level(self, value: float, colour: str, text: str, cls: str | None = None) -> str:
        """A dashed line across the plot at ``value`` (a boundary, a limit), labelled at its
        right end."""
        klass = f' class="{cls}"' if cls else ""
        return (f'<line x1="{self.left}" y1="{_f(self.y(value))}" x2="{self.w - self.right}" '
                f'y2="{_f(self.y(value))}" stroke="{colour}" stroke-width="2" '
                f'stroke-dasharray="6 4"/><text x="{self.w - self.right - 4}" '
                f'y="{_f(self.y(value) - 5)}" font-size="11" text-anchor="end" '
                f'fill="{colour}"{klass}>{escape(text)}</text>')

    def marker(self, x: float, y: float, fill: str, text: str) -> str:
        """A dot at (x, y) where the chart stopped or signalled, ``text`` above its left."""
        return (f'<circle cx="{_f(self.x(x))}" cy="{_f(self.y(y))}" r="7" '
                f'fill="{fill}" stroke="{INK}" stroke-width="1.5"/>'
                f'<text x="{_f(self.x(x) - 10)}" y="{_f(self.y(y) - 10)}" font-size="12" '
                f'text-anchor="end" fill="{INK}">{escape(text)}</text>')

    def svg(self, body: str, label: str) -> Markup:
        return Markup(f'<svg class="chart" viewBox="0 0 {self.w} {self.h}" role="img" '
                      f'aria-label="{escape(label)}"><title>{escape(label)}</title>{body}</svg>')


def path_chart(points: list[tuple[int, float]], lower: float, upper: float,
               decided: tuple[int, float, str] | None, voids: list[int], cap: int | None) -> Markup:
    """LLR after each evidence record against both boundaries."""
    xs = [p[0] for p in points] + ([cap] if cap else []) + [1]
    ys = [p[1] for p in points] + [lower, upper]
    fr = _Frame(xs, ys)
    body = [fr.axes("units audited in this cycle (evidence, in order of receipt)",
                    "log-likelihood ratio", xwhole=True)]
    for value, colour, name in ((upper, COLOURS["flagged"], "flag boundary"),
                                (lower, COLOURS["cleared"], "clear boundary")):
        body.append(fr.level(value, colour, f"{name} ({value:.3f})", cls="boundary-label"))
    if cap:
        mid = (fr.y(upper) + fr.y(lower)) / 2
        body.append(f'<line x1="{_f(fr.x(cap))}" y1="{fr.top}" x2="{_f(fr.x(cap))}" '
                    f'y2="{fr.h - fr.bottom}" stroke="{COLOURS["closed"]}" stroke-dasharray="2 3"/>'
                    # written up the cap line, midway between the boundaries: clear of
                    # the boundary labels, which sit at the right end of their lines
                    f'<text x="{_f(fr.x(cap) - 5)}" y="{_f(mid)}" font-size="11" '
                    f'text-anchor="middle" fill="{INK}" class="cap-label" '
                    f'transform="rotate(-90 {_f(fr.x(cap) - 5)} {_f(mid)})">cap {cap} units'
                    f'</text>')
    if len(points) > 1:
        steps = []
        for (x0, y0), (x1, y1) in zip(points, points[1:]):
            steps.append(f"{_f(fr.x(x0))},{_f(fr.y(y0))} {_f(fr.x(x1))},{_f(fr.y(y0))} "
                         f"{_f(fr.x(x1))},{_f(fr.y(y1))}")
        body.append(f'<polyline points="{" ".join(steps)}" fill="none" '
                    f'stroke="{COLOURS["monitoring"]}" stroke-width="2"/>')
    for v in voids:
        X, Y = fr.x(v), fr.h - fr.bottom - 6
        body.append(f'<path d="M{_f(X - 4)},{_f(Y - 4)} L{_f(X + 4)},{_f(Y + 4)} M{_f(X - 4)},'
                    f'{_f(Y + 4)} L{_f(X + 4)},{_f(Y - 4)}" stroke="{INK}" stroke-width="1.5"/>')
    if decided:
        units, llr, status = decided
        body.append(fr.marker(units, llr, COLOURS.get(status, INK),
                              f"{status} after {units} units"))
    label = (f"Path of the LLR over {points[-1][0] if points else 0} units; boundaries "
             f"{lower:.3f} and {upper:.3f}" + (f"; {decided[2]} after {decided[0]} units"
                                              if decided else ""))
    return fr.svg("".join(body), label)


def curve_chart(curve: list[dict], key: str, wald_key: str, ylabel: str, p0: float, p1: float,
                title: str) -> Markup:
    pts = [(c["p"], c[key]) for c in curve]
    wald = [(c["p"], c[wald_key]) for c in curve if c.get(wald_key) is not None]
    fr = _Frame([p for p, _ in pts], [v for _, v in pts] + [v for _, v in wald])
    body = [fr.axes("true rate of nonconforming passes", ylabel)]
    for value, name in ((p0, "p0"), (p1, "p1")):
        body.append(f'<line x1="{_f(fr.x(value))}" y1="{fr.top}" x2="{_f(fr.x(value))}" '
                    f'y2="{fr.h - fr.bottom}" stroke="{INK}" stroke-dasharray="2 3"/>'
                    f'<text x="{_f(fr.x(value) + 4)}" y="{fr.top + 12}" font-size="11" '
                    f'fill="{INK}">{name}</text>')
    for series, colour, dash, name in ((wald, COLOURS["approx"], ' stroke-dasharray="6 4"',
                                        "Wald approximation"),
                                       (pts, COLOURS["monitoring"], "", "exact")):
        line = " ".join(f"{_f(fr.x(p))},{_f(fr.y(v))}" for p, v in series)
        body.append(f'<polyline points="{line}" fill="none" stroke="{colour}" '
                    f'stroke-width="2"{dash}/>')
    body.append(f'<text x="{fr.w - fr.right - 4}" y="{fr.top + 14}" font-size="11" '
                f'text-anchor="end" fill="{COLOURS["monitoring"]}">solid: exact</text>'
                f'<text x="{fr.w - fr.right - 4}" y="{fr.top + 28}" font-size="11" '
                f'text-anchor="end" fill="{COLOURS["approx"]}">dashed: Wald approximation</text>')
    return fr.svg("".join(body), title)
