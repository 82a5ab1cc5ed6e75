"""The report's pictures as inline SVG, written by hand (no plotting library, no script).

Each picture is an interval plot: one row per item, a dot at the estimate and a bar across its
interval, on a shared horizontal axis with ticks, an axis label and optional vertical reference lines.
What is plotted and every word on the picture come from a :class:`~probe.report.model.Plot` of the
report model (groups' selection rates with the four-fifths line at 0.8 × the reference group's rate,
the top slices against the overall rate, the flip rates); this module only draws it.

Every picture has ``role="img"``, a ``<title>`` and a ``<desc>`` (referenced by ``aria-labelledby``),
and each row its own ``<title>`` with the exact numbers, so screen readers and hover both get them.
All text is XML-escaped. The output is meant to be inlined in an HTML5 document.
"""

from __future__ import annotations

import math
from html import escape

from .fmt import is_number as _ok
from .model import Plot

__all__ = ["render_plot"]

_WIDTH = 760
_ROW_H = 24
_TOP = 44
_BOTTOM = 52
_RIGHT = 24
_CHAR_W = 7.2  # average advance of a 12 px sans-serif glyph, to size the label column
_MAX_LABEL = 42


def _nice_step(span: float, target: int = 5) -> float:
    raw = span / max(target, 1)
    mag = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if m * mag >= raw:
            return m * mag
    return 10 * mag


def _domain(rows, lines, clamp, include_zero=False):
    xs = [x for r in rows for x in (r.value, r.low, r.high) if _ok(x)]
    xs += [ln.x for ln in lines if _ok(ln.x)] + ([0.0] if include_zero else [])
    if not xs:
        lo, hi = clamp or (0.0, 1.0)
    else:
        lo, hi = min(xs), max(xs)
    if hi - lo < 1e-9:
        lo, hi = lo - 0.05, hi + 0.05
    pad = 0.06 * (hi - lo)
    lo, hi = (lo if include_zero and lo == 0 else lo - pad), hi + pad
    if clamp:
        lo, hi = max(lo, clamp[0]), min(hi, clamp[1])
    step = _nice_step(hi - lo)
    lo, hi = math.floor(lo / step + 1e-9) * step, math.ceil(hi / step - 1e-9) * step
    if clamp:
        lo, hi = max(lo, clamp[0]), min(hi, clamp[1])
    return lo, hi, step


def _fmt_tick(x: float, step: float) -> str:
    decimals = max(0, math.ceil(-math.log10(step) - 1e-9))
    if abs(step * 10**decimals - round(step * 10**decimals)) > 1e-9:
        decimals += 1
    text = f"{x:.{decimals}f}"
    return "0" if float(text) == 0 else text


def _short(label: str) -> str:
    return label if len(label) <= _MAX_LABEL else label[: _MAX_LABEL - 1] + "…"


def render_plot(plot: Plot, *, uid: str) -> str:
    """An accessible SVG interval plot of ``plot``'s rows, one row each.

    Parameters
    ----------
    plot : Plot
        Rows top to bottom (a row without a finite value is listed with ``n/a``), reference lines
        (each with a legend entry), the title (also the accessible name), axis label and description,
        the axis bounds to keep within (``clamp``) and whether the axis starts at zero.
    uid : str
        A prefix unique within the page, for the ``id`` attributes.

    Returns
    -------
    str
        One ``<svg>`` element.
    """
    rows, lines, title, x_label = plot.rows, plot.lines, plot.title, plot.x_label
    description, clamp, include_zero = plot.description, plot.clamp, plot.include_zero
    lo, hi, step = _domain(rows, lines, clamp, include_zero)
    labels = [_short(r.label) for r in rows]
    left = int(min(max((len(s) for s in labels), default=4) * _CHAR_W + 20, 320))
    left = max(left, 90)
    plot_w = _WIDTH - left - _RIGHT
    height = _TOP + _ROW_H * max(len(rows), 1) + _BOTTOM
    y_axis = _TOP + _ROW_H * max(len(rows), 1)

    def sx(x: float) -> float:
        return round(left + (min(max(x, lo), hi) - lo) / (hi - lo) * plot_w, 2)

    e = lambda s: escape(str(s), quote=True)
    tid, did = f"{uid}-title", f"{uid}-desc"
    out = [
        (
            f'<svg class="plot" role="img" '
            f'aria-labelledby="{tid} {did}" viewBox="0 0 {_WIDTH} {height}" width="{_WIDTH}" '
            f'height="{height}" font-family="system-ui, sans-serif" font-size="12">'
        ),
        f'<title id="{tid}">{e(title)}</title>',
        f'<desc id="{did}">{e(description or title)}</desc>',
        f'<text x="{left}" y="18" font-size="14" font-weight="600" fill="#1f2328">{e(title)}</text>',
    ]
    # legend for the reference lines, under the title
    lx = left
    for i, ln in enumerate(lines):
        dash = ' stroke-dasharray="5 3"' if ln.dashed else ""
        colour = "#b35900" if i else "#444"
        out.append(
            f'<line x1="{lx}" y1="32" x2="{lx + 18}" y2="32" stroke="{colour}" stroke-width="1.5"{dash}/>'
            f'<text x="{lx + 22}" y="36" fill="#444">{e(ln.label)}</text>'
        )
        lx += 30 + int(len(ln.label) * _CHAR_W)
    # row stripes first: the grid, the reference lines and the data are drawn over them
    out.extend(
        f'<rect x="0" y="{_TOP + _ROW_H * i}" width="{_WIDTH}" height="{_ROW_H}" fill="#f6f8fa"/>'
        for i in range(0, len(rows), 2)
    )
    # grid and ticks
    n_ticks = round((hi - lo) / step)
    out.append('<g class="axis" fill="#444">')
    for k in range(n_ticks + 1):
        t = lo + k * step
        x = sx(t)
        out.append(
            f'<line x1="{x}" y1="{_TOP - 4}" x2="{x}" y2="{y_axis}" stroke="#e4e4e4"/>'
            f'<text x="{x}" y="{y_axis + 16}" text-anchor="middle">{e(_fmt_tick(t, step))}</text>'
        )
    out.append(
        f'<line x1="{left}" y1="{y_axis}" x2="{left + plot_w}" y2="{y_axis}" stroke="#888"/>'
        f'<text x="{left + plot_w / 2}" y="{y_axis + 38}" text-anchor="middle" '
        f'font-weight="600">{e(x_label)}</text></g>'
    )
    # reference lines behind the data
    for i, ln in enumerate(lines):
        if not _ok(ln.x) or not (lo <= ln.x <= hi):
            continue
        dash = ' stroke-dasharray="5 3"' if ln.dashed else ""
        colour = "#b35900" if i else "#444"
        x = sx(ln.x)
        out.append(
            f'<line x1="{x}" y1="{_TOP - 4}" x2="{x}" y2="{y_axis}" stroke="{colour}" '
            f'stroke-width="1.5"{dash}><title>{e(ln.label)}</title></line>'
        )
    # rows
    for i, (r, short) in enumerate(zip(rows, labels)):
        y = _TOP + _ROW_H * i + _ROW_H / 2
        colour = "#b3261e" if r.flagged else "#1f5fa8"
        name = f"{r.label}: {r.note}" if r.note else r.label
        parts = [f'<g class="row"><title>{e(name)}</title>']
        parts.append(
            f'<text x="{left - 10}" y="{y + 4}" text-anchor="end" fill="#1f2328">{e(short)}</text>'
        )
        if _ok(r.value):
            if _ok(r.low) and _ok(r.high):
                parts.append(
                    f'<line x1="{sx(r.low)}" y1="{y}" x2="{sx(r.high)}" y2="{y}" stroke="{colour}" '
                    f'stroke-width="2"/>'
                    f'<line x1="{sx(r.low)}" y1="{y - 5}" x2="{sx(r.low)}" y2="{y + 5}" '
                    f'stroke="{colour}" stroke-width="1.5"/>'
                    f'<line x1="{sx(r.high)}" y1="{y - 5}" x2="{sx(r.high)}" y2="{y + 5}" '
                    f'stroke="{colour}" stroke-width="1.5"/>'
                )
            shape = (
                f'<rect x="{sx(r.value) - 4.5}" y="{y - 4.5}" width="9" height="9" fill="{colour}"/>'
                if r.flagged
                else f'<circle cx="{sx(r.value)}" cy="{y}" r="4.5" fill="{colour}"/>'
            )
            parts.append(shape)
        else:
            # no bar: what the row's note says instead (why nothing was measured), else n/a
            parts.append(f'<text x="{left + 6}" y="{y + 4}" fill="#666">{e(r.note or "n/a")}</text>')
        parts.append("</g>")
        out.append("".join(parts))
    out.append("</svg>")
    return "\n".join(out)
