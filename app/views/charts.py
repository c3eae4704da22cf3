"""SVG charts drawn on the server: the stack walk and the vector maps.

Pure functions from typed service data to SVG text (escaped, ready for a template). Every
chart has a title and description for screen readers, axis labels with units, and tells its
series apart by line style and marker shape as well as colour (WCAG 2.2, 1.4.1).
Panel-frame convention (conventions.md): x right, y up, looking at side A; SVG's y runs down, so
y is negated when drawn.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from html import escape

from markupsafe import Markup

from app.schemas.panels import PanelRead, StackRead

SIDE_A, SIDE_B, FTB, LIMIT, FAN = "#0072B2", "#D55E00", "#1b2430", "#9c2f6e", "#8d99a6"


def nice_step(span: float, target: int = 6) -> float:
    """A 1, 2 or 5 times a power of ten step giving about ``target`` intervals over ``span``."""
    if span <= 0 or not math.isfinite(span):
        return 1.0
    raw = span / target
    power = 10.0 ** math.floor(math.log10(raw))
    return next(m * power for m in (1, 2, 5, 10) if m * power >= raw)


def nice_length(value: float) -> float:
    """The largest 1, 2 or 5 times a power of ten not above ``value`` (a scale arrow)."""
    if value <= 0 or not math.isfinite(value):
        return 1.0
    power = 10.0 ** math.floor(math.log10(value))
    return max(m * power for m in (1, 2, 5) if m * power <= value)


def fmt(v: float) -> str:
    return f"{v:.1f}".rstrip("0").rstrip(".")


def svg_document(width: int, height: int, title: str, desc: str, body: Iterable[str], *,
         ident: str, css_class: str) -> Markup:
    head = (f'<svg xmlns="http://www.w3.org/2000/svg" class="{css_class}" id="{ident}" '
            f'viewBox="0 0 {width} {height}" width="{width}" height="{height}" role="img" '
            f'aria-labelledby="{ident}-t {ident}-d">'
            f'<title id="{ident}-t">{escape(title)}</title>'
            f'<desc id="{ident}-d">{escape(desc)}</desc>')
    return Markup(head + "".join(body) + "</svg>")


def marker(kind: str, x: float, y: float, colour: str, css: str, label: str) -> str:
    tip = f"<title>{escape(label)}</title>"
    if kind == "circle":
        return (f'<circle class="{css}" cx="{x:.1f}" cy="{y:.1f}" r="4.5" fill="{colour}">'
                f"{tip}</circle>")
    if kind == "square":
        return (f'<rect class="{css}" x="{x - 4:.1f}" y="{y - 4:.1f}" width="8" height="8" '
                f'fill="#fff" stroke="{colour}" stroke-width="2">{tip}</rect>')
    return (f'<path class="{css}" d="M{x:.1f},{y - 5:.1f} l5,9 h-10 z" fill="#fff" '
            f'stroke="{colour}" stroke-width="2">{tip}</path>')


@dataclass(frozen=True)
class _Frame:
    """Plot area and the data ranges it shows."""

    left: float
    top: float
    width: float
    height: float
    x_max: float
    y_max: float

    def x(self, value: float) -> float:
        return self.left + self.width * value / self.x_max

    def y(self, value: float) -> float:
        return self.top + self.height * (1 - value / self.y_max)


def stack_walk_svg(stack: StackRead, panel: PanelRead, *, ftb_limit_um: float,
                   layers_per_side: int, ident: str = "stack-walk") -> Markup:
    """Cumulative FTB at the worst check point after each layer, each side's stack there, the
    forecast fan to the last layer and the limit line."""
    ftb = sorted({(r.layer, r.ftb_through_layer_um) for r in stack.layers})
    sides = {s: [(r.layer, math.hypot(*r.side_position_um)) for r in stack.layers
                 if r.side == s] for s in ("A", "B")}
    forecast = panel.forecast
    last = max((k for k, _ in ftb), default=0)
    values = [v for _, v in ftb] + [v for s in sides.values() for _, v in s] + [ftb_limit_um]
    if forecast is not None:
        values += [forecast.ftb_final_forecast_um, forecast.ftb_final_band_um[1]]
    step = nice_step(max(values) * 1.08)
    f = _Frame(left=62, top=16, width=560, height=270, x_max=layers_per_side,
               y_max=step * math.ceil(max(values) * 1.08 / step))
    body: list[str] = []
    for i in range(int(f.y_max / step) + 1):
        yv = i * step
        body.append(f'<line x1="{f.left}" x2="{f.left + f.width}" y1="{f.y(yv):.1f}" '
                    f'y2="{f.y(yv):.1f}" stroke="#e1e4e8"/>'
                    f'<text x="{f.left - 6}" y="{f.y(yv) + 4:.1f}" text-anchor="end" '
                    f'font-size="11">{fmt(yv)}</text>')
    for k in range(0, layers_per_side + 1):
        body.append(f'<text x="{f.x(k):.1f}" y="{f.top + f.height + 16}" text-anchor="middle" '
                    f'font-size="11">{k}</text>')
    body.append(f'<rect x="{f.left}" y="{f.top}" width="{f.width}" height="{f.height}" '
                f'fill="none" stroke="#7a838d"/>')
    body.append(f'<text x="{f.left + f.width / 2}" y="{f.top + f.height + 36}" '
                f'text-anchor="middle" font-size="12">Layer (per side; 0 = core)</text>'
                f'<text transform="translate(16 {f.top + f.height / 2}) rotate(-90)" '
                f'text-anchor="middle" font-size="12">Misregistration at the worst check point '
                f'(µm)</text>')
    if forecast is not None and last < layers_per_side:
        x0, y0 = f.x(last), f.y(panel.ftb_current_um)
        lo, hi = forecast.ftb_final_band_um
        xn = f.x(layers_per_side)
        body.append(
            f'<path class="forecast-fan" d="M{x0:.1f},{y0:.1f} L{xn:.1f},{f.y(hi):.1f} '
            f'L{xn:.1f},{f.y(lo):.1f} Z" '
            f'fill="{FAN}" fill-opacity="0.3" stroke="{FAN}">'
            f"<title>Forecast 95 % band at layer {layers_per_side}: {fmt(lo)} to "
            f"{fmt(hi)} µm</title></path>"
            f'<line class="forecast-line" x1="{x0:.1f}" y1="{y0:.1f}" '
            f'x2="{f.x(layers_per_side):.1f}" y2="{f.y(forecast.ftb_final_forecast_um):.1f}" '
            f'stroke="{FTB}" stroke-width="2" stroke-dasharray="2 4"/>'
        )
    body.append(f'<line class="limit-line" x1="{f.left}" x2="{f.left + f.width}" '
                f'y1="{f.y(ftb_limit_um):.1f}" y2="{f.y(ftb_limit_um):.1f}" stroke="{LIMIT}" '
                f'stroke-width="2" stroke-dasharray="8 4"/>'
                f'<text x="{f.left + 6}" y="{f.y(ftb_limit_um) - 5:.1f}" font-size="11" '
                f'fill="{LIMIT}">FTB limit {fmt(ftb_limit_um)} µm</text>')
    series = (("side-a", "A", SIDE_A, "square", "6 3"), ("side-b", "B", SIDE_B, "triangle",
                                                          "2 3"))
    for css, side, colour, shape, dash in series:
        pts = [(0, 0.0), *sides[side]]
        body.append(_polyline(f, pts, colour, dash, css))
        body += [marker(shape, f.x(k), f.y(v), colour, f"{css}-point",
                         f"Side {side} after layer {k}: {fmt(v)} µm") for k, v in sides[side]]
    body.append(_polyline(f, [(0, 0.0), *ftb], FTB, "", "ftb-walk", width=2.5))
    body += [marker("circle", f.x(k), f.y(v), FTB, "ftb-point",
                     f"FTB after layer {k}: {fmt(v)} µm") for k, v in ftb]
    body.append(_legend(f.left + 10, f.top + f.height + 48, [
        ("circle", FTB, "", "FTB, both sides"), ("square", SIDE_A, "6 3", "Side A stack"),
        ("triangle", SIDE_B, "2 3", "Side B stack"), ("fan", FAN, "", "Forecast, 95 % band"),
        ("limit", LIMIT, "8 4", "FTB limit")]))
    desc = (f"Worst FTB after each of {len(ftb)} layers, ending at {fmt(panel.ftb_current_um)} µm "
            f"against a limit of {fmt(ftb_limit_um)} µm"
            + (f"; forecast {fmt(forecast.ftb_final_forecast_um)} µm at layer {layers_per_side}"
               if forecast is not None else "") + ".")
    return svg_document(640, 360, "Stack walk", desc, body, ident=ident,
                        css_class="chart stack-walk")


def _polyline(f: _Frame, pts: Sequence[tuple[float, float]], colour: str, dash: str, css: str,
              width: float = 2.0) -> str:
    coords = " ".join(f"{f.x(k):.1f},{f.y(v):.1f}" for k, v in pts)
    dashing = f' stroke-dasharray="{dash}"' if dash else ""
    return (f'<polyline class="{css}" points="{coords}" fill="none" stroke="{colour}" '
            f'stroke-width="{width}"{dashing}/>')


def _legend(x: float, y: float, items: Sequence[tuple[str, str, str, str]]) -> str:
    out, cx = [], x
    for shape, colour, dash, label in items:
        if shape == "fan":
            out.append(f'<rect x="{cx}" y="{y - 7}" width="22" height="10" fill="{colour}" '
                       f'fill-opacity="0.3" stroke="{colour}"/>')
        else:
            dashing = f' stroke-dasharray="{dash}"' if dash else ""
            out.append(f'<line x1="{cx}" x2="{cx + 22}" y1="{y - 2}" y2="{y - 2}" '
                       f'stroke="{colour}" stroke-width="2"{dashing}/>')
            if shape != "limit":
                out.append(marker(shape, cx + 11, y - 2, colour, "legend-mark", label))
        out.append(f'<text x="{cx + 27}" y="{y + 2}" font-size="11">{escape(label)}</text>')
        cx += 32 + 5.8 * len(label)
    return "".join(out)


@dataclass(frozen=True)
class Arrow:
    """One vector to draw: at (x, y) mm, displacement (dx, dy) µm, panel frame."""

    x_mm: float
    y_mm: float
    dx_um: float
    dy_um: float
    label: str = ""


def vector_map_svg(arrows: Sequence[Arrow], *, width_mm: float, height_mm: float, title: str,
                   ident: str, colour: str = FTB, size_px: int = 300,
                   mark: tuple[float, float] | None = None, what: str = "vector",
                   seen_from: str = "side A") -> Markup:
    """Arrows over the panel outline with a scale arrow; ``mark`` rings one point (the worst).
    ``seen_from`` names the view: side A (the panel frame) or, for a tool frame of side B,
    side B."""
    pad = 34
    scale_px = (size_px - 2 * pad) / max(width_mm, height_mm)  # px per mm
    w, h = width_mm * scale_px, height_mm * scale_px
    total_h = int(h + 2 * pad + 48)
    longest = max((math.hypot(a.dx_um, a.dy_um) for a in arrows), default=0.0)
    # The longest arrow is drawn an eighth of the panel's width long.
    px_per_um = (w / 8) / longest if longest > 0 else 1.0
    cx, cy = pad + w / 2, pad + h / 2
    body = [f'<defs><marker id="{ident}-head" viewBox="0 0 10 10" refX="9" refY="5" '
            f'markerWidth="6" markerHeight="6" orient="auto-start-reverse">'
            f'<path d="M0,0 L10,5 L0,10 z" fill="{colour}"/></marker></defs>',
            f'<rect class="panel-outline" x="{pad}" y="{pad}" width="{w:.1f}" height="{h:.1f}" '
            f'fill="#fbfbf9" stroke="#4a5562" stroke-width="1.5"/>',
            f'<g class="arrows" stroke="{colour}" stroke-width="1.6">']
    for a in arrows:
        x0, y0 = cx + a.x_mm * scale_px, cy - a.y_mm * scale_px
        x1, y1 = x0 + a.dx_um * px_per_um, y0 - a.dy_um * px_per_um
        label = a.label or (f"{fmt(math.hypot(a.dx_um, a.dy_um))} µm at "
                            f"({fmt(a.x_mm)}, {fmt(a.y_mm)}) mm")
        body.append(f'<line x1="{x0:.1f}" y1="{y0:.1f}" x2="{x1:.1f}" y2="{y1:.1f}" '
                    f'marker-end="url(#{ident}-head)"><title>{escape(label)}</title></line>')
    body.append("</g>")
    if mark is not None:
        body.append(f'<circle class="worst-mark" cx="{cx + mark[0] * scale_px:.1f}" '
                    f'cy="{cy - mark[1] * scale_px:.1f}" r="7" fill="none" stroke="{LIMIT}" '
                    f'stroke-width="2"/>')
    ref = nice_length(longest) if longest > 0 else 1.0
    y_scale = pad + h + 24
    body.append(f'<g class="scale-arrow" stroke="{colour}" stroke-width="1.6">'
                f'<line x1="{pad}" y1="{y_scale:.1f}" x2="{pad + ref * px_per_um:.1f}" '
                f'y2="{y_scale:.1f}" marker-end="url(#{ident}-head)"/></g>'
                f'<text x="{pad + ref * px_per_um + 8:.1f}" y="{y_scale + 4:.1f}" '
                f'font-size="11">{fmt(ref)} µm {escape(what)}</text>'
                # Below the scale arrow, where no arrow reaches (the top row's arrows may
                # rise above the outline).
                f'<text x="{pad}" y="{y_scale + 22:.1f}" '
                f'font-size="11">Panel {fmt(width_mm)} × {fmt(height_mm)} mm, from '
                f"{escape(seen_from)}, y up</text>")
    desc = (f"{len(arrows)} arrows; the longest is {fmt(longest)} µm; the scale arrow is "
            f"{fmt(ref)} µm.")
    return svg_document(size_px, total_h, title, desc, body, ident=ident,
                        css_class="chart vector-map")
