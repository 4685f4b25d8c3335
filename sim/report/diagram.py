"""The model as a diagram: states as boxes, transitions as arrows, in hand-written SVG.

Layout: the living states in one row (initial states first, then the model's order), the absorbing
states in a row below. Arrows between neighbours in the row are straight (rightwards above the
middle, leftwards below it, so opposite transitions stay apart), between states further apart an arc
above the row; arrows to the lower row are straight, their ends spread along the boxes' edges.
Background mortality is one dashed arrow from each living state to its target. Labels name the transition and its hazard family.
"""

from __future__ import annotations

from html import escape

from ..model import Model

__all__ = ["model_svg"]

BOX_W, BOX_H, GAP, ROW_GAP, MARGIN = 130, 44, 150, 150, 30


def _initial_states(model: Model) -> list[str]:
    p = model.population
    if p.single_initial_state is not None:
        return [p.single_initial_state]
    names: list[str] = []
    for sex in p.sexes:
        names += [s for s, v in p.initial_shares(sex).items() if v > 0 and s not in names]
    return names


def model_svg(model: Model) -> str:
    """An SVG drawing of ``model`` (see the module docstring), sized to its content."""
    initial = _initial_states(model)
    living = [s.name for s in model.states if not s.absorbing]
    living = [s for s in living if s in initial] + [s for s in living if s not in initial]
    absorbing = [s.name for s in model.states if s.absorbing]
    width = max(480, MARGIN * 2 + max(len(living), len(absorbing), 1) * (BOX_W + GAP) - GAP + 60)
    arcs = len(living) > 2 and any(abs(living.index(t.source) - living.index(t.target)) > 1
                                   for t in model.transitions if t.target in living)
    top_y = MARGIN + 20 + (60 + 0.12 * (len(living) - 1) * (BOX_W + GAP) if arcs else 0)
    bottom_y = top_y + ROW_GAP
    height = bottom_y + BOX_H + MARGIN + 30
    pos: dict[str, tuple[float, float]] = {}
    for row, y in ((living, top_y), (absorbing, bottom_y)):
        span = len(row) * (BOX_W + GAP) - GAP
        x0 = (width - span) / 2
        for i, name in enumerate(row):
            pos[name] = (x0 + i * (BOX_W + GAP), y)
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width:.0f}" height="{height:.0f}" '
             f'viewBox="0 0 {width:.0f} {height:.0f}" role="img" aria-label="diagram of the model" '
             f'font-family="DejaVu Sans, Arial, sans-serif" font-size="11">',
             '<defs><marker id="arrow" viewBox="0 0 10 10" refX="9" refY="5" markerWidth="7" markerHeight="7" '
             'orient="auto-start-reverse"><path d="M0,0 L10,5 L0,10 z" fill="#333"/></marker></defs>']
    # arrows to the lower row: spread their ends along the source's bottom and the target's top edge
    down = [(t.source, t.target, f"{t.name} ({t.hazard.family})", False) for t in model.transitions
            if t.target not in living]
    if model.background is not None:
        down += [(s, model.background.target, "", True) for s in living]
    starts = _spread(down, key=lambda a: a[0], order=lambda a: (pos[a[1]][0], not a[3]))
    ends = _spread(down, key=lambda a: a[1], order=lambda a: (pos[a[0]][0], not a[3]))
    for i, (src, dst, label, dashed) in enumerate(down):
        (sx, sy), (dx, dy) = pos[src], pos[dst]
        parts.append(_line(sx + starts[i] * BOX_W, sy + BOX_H, dx + ends[i] * BOX_W, dy, label, dashed))
    seen: dict[tuple[str, str], int] = {}
    for t in model.transitions:
        if t.target not in living:
            continue
        pair = (t.source, t.target)
        k = seen.get(pair, 0)
        seen[pair] = k + 1
        parts.append(_row_arrow(pos[t.source], pos[t.target], f"{t.name} ({t.hazard.family})", k))
    for name, (x, y) in pos.items():
        bold = name in initial
        parts.append(f'<rect x="{x:.1f}" y="{y:.1f}" width="{BOX_W}" height="{BOX_H}" rx="6" '
                     f'fill="{"#eef4fb" if name in living else "#f2f2f2"}" stroke="#1b3a5c" '
                     f'stroke-width="{2.5 if bold else 1.2}"/>')
        parts.append(f'<text x="{x + BOX_W / 2:.1f}" y="{y + BOX_H / 2 + 4:.1f}" text-anchor="middle" '
                     f'font-size="12"{" font-weight=" + chr(34) + "bold" + chr(34) if bold else ""}>{escape(name)}</text>')
        if bold:
            parts.append(f'<line x1="{x - 26:.1f}" y1="{y + BOX_H / 2:.1f}" x2="{x - 2:.1f}" y2="{y + BOX_H / 2:.1f}" '
                         f'stroke="#333" stroke-width="1.4" marker-end="url(#arrow)"/>')
    parts.append(f'<text x="{MARGIN}" y="{height - 10}" font-size="10" fill="#555">Bold outline and entry arrow: '
                 f'initial state{"s" if len(initial) > 1 else ""}'
                 f'{"; dashed: background mortality" if model.background is not None else ""}.</text>')
    parts.append("</svg>")
    return "".join(parts)


def _spread(arrows: list, key, order) -> list[float]:
    """For each arrow, where along its box's edge (0..1) it attaches: the arrows sharing a box
    (``key``) spread evenly, in ``order``."""
    out = [0.5] * len(arrows)
    groups: dict[str, list[int]] = {}
    for i, a in enumerate(arrows):
        groups.setdefault(key(a), []).append(i)
    for members in groups.values():
        members.sort(key=lambda i: order(arrows[i]))
        for j, i in enumerate(members):
            out[i] = (j + 1) / (len(members) + 1)
    return out


def _label(x: float, y: float, text: str, anchor: str) -> str:
    return (f'<text x="{x:.1f}" y="{y:.1f}" text-anchor="{anchor}" fill="#222" paint-order="stroke" '
            f'stroke="#ffffff" stroke-width="3">{escape(text)}</text>') if text else ""


def _line(x1: float, y1: float, x2: float, y2: float, label: str, dashed: bool) -> str:
    """A straight arrow down to the absorbing row, labelled a third of the way along."""
    style = ' stroke-dasharray="5,4" stroke="#777"' if dashed else ' stroke="#333"'
    out = (f'<path d="M{x1:.1f},{y1:.1f} L{x2:.1f},{y2:.1f}" fill="none"{style} stroke-width="1.3" '
           f'marker-end="url(#arrow)"/>')
    lx, ly = x1 + (x2 - x1) / 3, y1 + (y2 - y1) / 3
    return out + _label(lx + (6 if x2 >= x1 else -6), ly, label, "start" if x2 >= x1 else "end")


def _row_arrow(a: tuple[float, float], b: tuple[float, float], label: str, k: int) -> str:
    """An arrow between two living states: straight between neighbours (rightwards above the middle,
    leftwards below it, so a pair of opposite transitions stays apart), an arc above the row
    otherwise (leftwards higher than rightwards)."""
    (ax, ay), (bx, by) = a, b
    right = bx > ax
    if abs(bx - ax) <= BOX_W + GAP + 1:
        y = ay + BOX_H / 2 + (-8 if right else 8) + (-6 if right else 6) * k
        x1, x2 = (ax + BOX_W, bx) if right else (ax, bx + BOX_W)
        path = f"M{x1:.1f},{y:.1f} L{x2:.1f},{y:.1f}"
        lx, ly = (x1 + x2) / 2, y - 5 if right else y + 14
        anchor = "middle"
    else:
        x1, x2 = ax + BOX_W * (0.65 if right else 0.35), bx + BOX_W * (0.35 if right else 0.65)
        lift = 30 + 0.12 * abs(bx - ax) + (18 if not right else 0) + 12 * k
        cy = ay - 2 * lift
        path = f"M{x1:.1f},{ay:.1f} Q{(x1 + x2) / 2:.1f},{cy:.1f} {x2:.1f},{ay:.1f}"
        lx, ly, anchor = (x1 + x2) / 2, ay - lift - 5, "middle"
    out = f'<path d="{path}" fill="none" stroke="#333" stroke-width="1.3" marker-end="url(#arrow)"/>'
    return out + _label(lx, ly, label, anchor)
