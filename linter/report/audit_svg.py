"""The audit page's SVG drawings of the pictures (``audit_pictures``): batch arithmetic and token
budget. Every text that came from a config goes through ``esc``; ``anchor`` turns a location into
the id of its line on the page (or "")."""
from __future__ import annotations

import html
from typing import Callable

from ..common.findings import Location
from ..common.redact import for_text
from .audit_pictures import Budget, Picture, Quantity, budget_words, num

Anchor = Callable[[Location | None], str]

# The fill of a broken step: a colour used nowhere else on the page (the browser test looks for it).
BROKEN_FILL = "#fbd5d5"
BROKEN_INK = "#a50f15"


def esc(value) -> str:
    """Escape any text for an HTML text node or a quoted attribute: masked (no credential is shown,
    ``trimtab.common.redact``), control and bidirectional-override characters shown, never obeyed (they
    could make the source read differently from what the loader reads), then HTML-escaped."""
    return html.escape(for_text(value), quote=True)


# --- pictures ---------------------------------------------------------------------------------------
W, LEFT, BAR_X, BAR_W = 980, 300, 316, 640


def _svg_text(x, y, text, cls="", anchor="start", extra="") -> str:
    c = f' class="{cls}"' if cls else ""
    a = f' text-anchor="{anchor}"' if anchor != "start" else ""
    return f'<text x="{x:.1f}" y="{y:.1f}"{c}{a}{extra}>{esc(text)}</text>'


def _origin(anchor: Anchor, qn: Quantity, x, y) -> str:
    if qn.value is None and qn.origin == "not found":
        return ""
    t = _svg_text(x, y, qn.origin, "origin", extra=f' data-origin-of="{esc(qn.concept)}"')
    a = anchor(qn.loc)
    return f'<a href="#{a}">{t}</a>' if a else t


def _label(anchor: Anchor, x, y, title: str, items: list[tuple[str, Quantity]]) -> list[str]:
    """A step's label: its title, then per quantity 'name = number' and where it came from."""
    out = [_svg_text(x, y, title, "step-title")]
    for k, (name, qn) in enumerate(items):
        yy = y + 17 + k * 30
        shown = ("not found" if qn.origin == "not found" else "?") if qn.value is None else (qn.shown or num(qn.value))
        out.append(f'<text x="{x:.1f}" y="{yy:.1f}" class="qty"><tspan>{esc(name)} = </tspan>'
                   f'<tspan class="num" data-concept="{esc(qn.concept)}">{esc(shown)}</tspan></text>')
        out.append(_origin(anchor, qn, x + 10, yy + 13))
    return out


def _segments(x, y, w, h, count: int, cls: str, unit_label: str = "", limit: int = 128,
              many: str = "") -> list[str]:
    """A bar split into ``count`` equal boxes (one box with the count written in it when too many)."""
    out: list = []
    if count <= 0:
        return out
    many = many or f"{count} \u00d7 {unit_label}"
    if count > limit:
        out.append(f'<rect x="{x:.1f}" y="{y:.1f}" width="{w:.1f}" height="{h:.1f}" class="{cls} dense"/>')
        out.append(_svg_text(x + w / 2, y + h / 2 + 4, many, "in-bar", "middle"))
        return out
    sw = w / count
    for k in range(count):
        alt = " alt" if k % 2 else ""
        out.append(f'<rect x="{x + k * sw:.1f}" y="{y:.1f}" width="{sw:.1f}" height="{h:.1f}" class="{cls}{alt}"/>')
    if unit_label and sw >= 7 * len(unit_label) + 6:
        for k in range(count):
            out.append(_svg_text(x + k * sw + sw / 2, y + h / 2 + 4, unit_label, "in-bar", "middle"))
    elif unit_label:
        out.append(_svg_text(x + w / 2, y - 4, many, "in-bar above", "middle"))
    return out


def _broken_box(rid: str, x, y, w, h, label: str, key: str, why: str) -> list[str]:
    """A step drawn as broken: hatched box with a torn (zigzag) edge, a cross and the remainder."""
    w = max(w, 18.0)
    teeth = max(2, int(h // 8))
    zig = " ".join(f"L{x + w - (6 if t % 2 else 0):.1f},{y + t * h / teeth:.1f}" for t in range(teeth + 1))
    path = f"M{x:.1f},{y:.1f} {zig} L{x:.1f},{y + h:.1f} Z"
    return [f'<g class="broken" data-broken="{esc(key)}">',
            f"<title>{esc(why)}</title>",
            f'<path d="{path}" class="broken-fill"/>',
            f'<path d="{path}" fill="url(#{rid}-hatch)" class="broken-edge"/>',
            _broken_label(x, y + h + 14, w, f"\u2716 {label}"),
            "</g>"]


def _broken_label(x, y, w, text: str) -> str:
    # Kept inside the picture: right-aligned to the box when it would run off the right edge.
    if x + 3 + 7 * len(text) > W - 6:
        return _svg_text(min(x + w, W - 6), y, text, "broken-label", "end")
    return _svg_text(x + 3, y, text, "broken-label")


def _zoom(x1a, x1b, y1, x2a, x2b, y2) -> str:
    return (f'<path d="M{x1a:.1f},{y1:.1f} L{x2a:.1f},{y2:.1f} M{x1b:.1f},{y1:.1f} L{x2b:.1f},{y2:.1f}" '
            'class="zoom"/>')


def _pos(n):
    """A count the picture can draw (a box needs a positive size); None otherwise."""
    return n if isinstance(n, int) and n > 0 else None


def batch_svg(anchor: Anchor, rid: str, pic: Picture) -> str:
    P, G, R, M, u, D, A = (_pos(n) for n in (pic.P, pic.G, pic.R, pic.M, pic.u, pic.D, pic.A))
    steps = {s.key: s for s in pic.steps}
    row_h, bar_h = 74, 26
    body: list[str] = []
    total = max([n for n in (R, P * G if P and G else None) if n] or [0])
    scale = BAR_W / total if total else 0
    y = 24
    # 1 prompts -------------------------------------------------------------------------------------
    s = steps["prompts"]
    body += _label(anchor, 12, y, "1  " + s.title, [("prompts", s.quantities[0])])
    if P and G and scale:
        body += _segments(BAR_X, y, P * G * scale, bar_h, P, "bar-prompt", "1", many=f"{num(P)} prompts")
    else:
        body.append(_unknown(y, bar_h, "prompts per step or group size not found"))
    y += row_h
    # 2 groups --------------------------------------------------------------------------------------
    s = steps["groups"]
    body += _label(anchor, 12, y, "2  " + s.title, [("group size G", s.quantities[0])])
    if P and G and scale:
        body += _segments(BAR_X, y, P * G * scale, bar_h, P, "bar-group", f"{G}",
                          many=f"{num(P)} groups of {G} completions")
        body.append(_svg_text(BAR_X, y + bar_h + 16, f"{P} groups \u00d7 {G} completions each", "note"))
    else:
        body.append(_unknown(y, bar_h, "group size not found" if not G else "prompts per step not found"))
    y += row_h
    # 3 completions ---------------------------------------------------------------------------------
    s = steps["completions"]
    body += _label(anchor, 12, y, "3  " + s.title, [("completions R", s.quantities[0])])
    if R and scale:
        body.append(f'<rect x="{BAR_X}" y="{y}" width="{R * scale:.1f}" height="{bar_h}" class="bar-compl"/>')
        body.append(_svg_text(BAR_X + R * scale / 2, y + bar_h / 2 + 4, f"{num(R)} completions", "in-bar", "middle"))
        if s.broken and P and G:
            lo, hi = sorted((R, P * G))
            body += _broken_box(rid, BAR_X + lo * scale, y, (hi - lo) * scale, bar_h,
                                f"{R} stated \u2260 {P} \u00d7 {G} = {P * G}", "completions", s.broken)
    else:
        body.append(_unknown(y, bar_h, "completions per step not known"))
    y += row_h
    # 4 mini-batches ------------------------------------------------------------------------------
    s = steps["mini"]
    body += _label(anchor, 12, y, "4  " + s.title, [("mini-batch M", s.quantities[0])])
    mini_right = None
    if R and M and scale and pic.mini_parts is not None:
        k, r = pic.mini_parts, pic.mini_left
        body += _segments(BAR_X, y, k * M * scale, bar_h, k, "bar-mini", f"{M}",
                          many=f"{num(k)} mini-batches of {M}")
        if k:
            mini_right = BAR_X + M * scale
        if r:
            body += _broken_box(rid, BAR_X + k * M * scale, y, r * scale, bar_h,
                                f"remainder {r}: {R} = {k} \u00d7 {M} + {r}", "mini", s.broken)
        else:
            body.append(_svg_text(BAR_X, y + bar_h + 16, f"{k} mini-batch{'es' if k != 1 else ''} of {M}", "note"))
    else:
        body.append(_unknown(y, bar_h, "mini-batch or completions per step not found"))
    y += row_h
    # 5 one mini-batch: ranks x micro-batches x accumulation ----------------------------------------------
    s = steps["micro"]
    labels = _label(anchor, 12, y, "5  One mini-batch across ranks",
                    [("data-parallel ranks D", s.quantities[0]), ("micro-batch per GPU", s.quantities[1]),
                     ("accumulation A", s.quantities[2])])
    body += labels
    top = y + 8
    lanes_h = 0
    if M and u and D and pic.columns is not None:
        k, r = pic.columns, pic.columns_left
        cols = k + (1 if r else 0)
        cw = BAR_W / cols if cols else BAR_W
        shown = D if D <= 8 else 7
        lane_h = 14
        if mini_right is not None:
            body.append(_zoom(BAR_X, mini_right, y - row_h + bar_h, BAR_X, BAR_X + (k * cw if k else cw), top))
        dense = k > 48
        for lane in range(shown):
            ly = top + lane * (lane_h + 3)
            if dense:
                body.append(f'<rect x="{BAR_X}" y="{ly}" width="{k * cw:.1f}" height="{lane_h}" class="bar-micro dense"/>')
            else:
                for col in range(k):
                    alt = " alt" if col % 2 else ""
                    body.append(f'<rect x="{BAR_X + col * cw:.1f}" y="{ly}" width="{cw:.1f}" height="{lane_h}" '
                                f'class="bar-micro{alt}"/>')
                    if cw >= 24:
                        body.append(_svg_text(BAR_X + col * cw + cw / 2, ly + lane_h - 3, f"{u}", "lane",
                                              "middle"))
            body.append(_svg_text(BAR_X - 4, ly + lane_h - 3, f"rank {lane}", "lane", "end"))
        lanes_h = shown * (lane_h + 3)
        if D > shown:
            body.append(_svg_text(BAR_X + 4, top + lanes_h + 10, f"\u22ee {D - shown} more ranks, the same", "note"))
            lanes_h += 14
        if k:
            body.append(_svg_text(BAR_X, top + lanes_h + 14,
                                  f"each box: {u} completions on one rank; {k} accumulation step(s) per update", "note"))
        if r:
            body += _broken_box(rid, BAR_X + k * cw, top, cw, lanes_h - 3,
                                f"remainder {r}: {M} = {k} \u00d7 ({u} \u00d7 {D}) + {r}", "micro", s.broken)
        elif s.broken:
            body += _broken_box(rid, BAR_X + k * cw - 18, top, 18, lanes_h - 3,
                                f"stated accumulation {A} \u2260 {k}", "micro", s.broken)
        lanes_h += 22
    elif s.broken:  # the data-parallel ranks do not divide out of the world size
        body += _broken_box(rid, BAR_X, top, BAR_W, bar_h, f"remainder {s.remainder}: {s.text.split(': ', 1)[-1]}",
                            "micro", s.broken)
        lanes_h = bar_h + 16
    else:
        body.append(_unknown(y, bar_h, "mini-batch, micro-batch or data-parallel ranks not found"))
        lanes_h = bar_h
    y += max(lanes_h + 24, 112)
    s = steps["updates"]
    body += _label(anchor, 12, y, "6  " + s.title, [("epochs E", s.quantities[0])])
    parts = s.text.split("; ")
    for n, part in enumerate(parts):
        body.append(_svg_text(BAR_X, y + 17 + n * 15, part, "note strong" if n == 0 else "note"))
    height = y + max(17 + 15 * len(parts), 40) + 8
    broken = [x.broken for x in pic.steps if x.broken]
    desc = "; ".join(f"{x.title}: {x.text}" for x in pic.steps)
    return "\n".join([
        f'<svg class="batch" role="img" aria-labelledby="{rid}-bt {rid}-bd" viewBox="0 0 {W} {height}" '
        f'width="{W}" height="{height}" xmlns="http://www.w3.org/2000/svg" data-broken-steps="{len(broken)}">',
        f'<title id="{rid}-bt">Batch arithmetic{": " + esc(str(len(broken))) + " broken step(s)" if broken else ""}</title>',
        f'<desc id="{rid}-bd">{esc(desc)}</desc>',
        _defs(rid),
        *body,
        "</svg>"])


def _unknown(y, h, text) -> str:
    return (f'<g class="unknown"><rect x="{BAR_X}" y="{y}" width="{BAR_W}" height="{h}" class="unknown-box"/>'
            f'{_svg_text(BAR_X + 8, y + h / 2 + 4, "? " + text, "in-bar")}</g>')


def _defs(rid: str) -> str:
    return (f'<defs><pattern id="{rid}-hatch" width="8" height="8" patternUnits="userSpaceOnUse" '
            f'patternTransform="rotate(45)"><rect width="3" height="8" class="hatch-line"/></pattern></defs>')


def budget_svg(anchor: Anchor, rid: str, b: Budget) -> str:
    rid = rid + "-tok"
    vals = [x.value for x in (b.engine, b.model) if _pos(x.value)]
    p, r = _pos(b.prompt.value), _pos(b.response.value)
    seq = (p or 0) + (r or 0)
    top = max(vals + [seq, 1])
    scale = BAR_W / top
    bar_h, row_h = 22, 56
    body = []
    y = 22
    body += _label(anchor, 12, y, "Prompt + response", [("prompt", b.prompt), ("response", b.response)])
    if p is not None and r is not None:
        body.append(_svg_text(BAR_X, y + bar_h + 14, f"{num(p)} + {num(r)} = {num(seq)} tokens per sequence",
                              "note"))
    if p is not None:
        body.append(f'<rect x="{BAR_X}" y="{y}" width="{p * scale:.1f}" height="{bar_h}" class="bar-prompt"/>')
        if p * scale > 60:
            body.append(_svg_text(BAR_X + p * scale / 2, y + 15, f"prompt {num(p)}", "in-bar", "middle"))
    if r is not None:
        x0 = BAR_X + (p or 0) * scale
        body.append(f'<rect x="{x0:.1f}" y="{y}" width="{r * scale:.1f}" height="{bar_h}" class="bar-response"/>')
        if r * scale > 70:
            body.append(_svg_text(x0 + r * scale / 2, y + 15, f"response {num(r)}", "in-bar", "middle"))
    if p is None and r is None:
        body.append(_unknown(y, bar_h, "prompt and response lengths not found"))
    y += 30
    limits = [("engine", "Engine context", b.engine), ("model", "Model context", b.model)]
    rows_y = {}
    for key, title, qn in limits:
        y += row_h
        rows_y[key] = y
        body += _label(anchor, 12, y, title, [("tokens", qn)])
        if _pos(qn.value):
            body.append(f'<rect x="{BAR_X}" y="{y}" width="{qn.value * scale:.1f}" height="{bar_h}" class="bar-ctx"/>')
            body.append(_svg_text(BAR_X + 6, y + 15, f"{num(qn.value)} tokens", "in-bar"))
            body.append(f'<path d="M{BAR_X + qn.value * scale:.1f},14 V{y + bar_h + 4}" class="limit"/>')
        else:
            body.append(_unknown(y, bar_h, f"{title.lower()} not found"))
    for key, why, excess in b.broken:
        if key.startswith("sequence"):
            limit = b.engine.value if key.endswith("engine") else b.model.value
            body += _broken_box(rid, BAR_X + limit * scale, 22, excess * scale, bar_h,
                                f"over by {num(excess)} tokens", key, why)
        else:
            body += _broken_box(rid, BAR_X + b.model.value * scale, rows_y["engine"], excess * scale, bar_h,
                                f"over the model context by {num(excess)}", key, why)
    height = y + 48
    desc = "; ".join(w for _k, w, _x in b.broken) or budget_words(b)
    return "\n".join([
        f'<svg class="budget" role="img" aria-labelledby="{rid}-t {rid}-d" viewBox="0 0 {W} {height}" width="{W}" '
        f'height="{height}" xmlns="http://www.w3.org/2000/svg" data-broken-steps="{len(b.broken)}">',
        f'<title id="{rid}-t">Token budget</title><desc id="{rid}-d">{esc(desc)}</desc>',
        _defs(rid), *body, "</svg>"])
