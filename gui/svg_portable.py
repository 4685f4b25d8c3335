"""Make the SVG that Qt's ``QSvgGenerator`` writes look the same in every renderer (pure XML, no Qt).

Qt writes each drawing call as a ``<g transform="matrix(a,b,c,d,e,f)">`` holding geometry in the
*item's* coordinates, and marks the strokes ``vector-effect="non-scaling-stroke"`` (pyqtgraph's pens
are cosmetic: their width is in screen pixels). A curve is therefore a path in data units under a
transform that scales them by hundreds of pixels per unit. Browsers honour ``non-scaling-stroke``;
librsvg (GNOME, Inkscape's import, many converters) and ImageMagick do not, so a 2-pixel pen becomes
hundreds of pixels wide: the "large filled shapes" and the "black band" (a dashed tolerance line) of
issue 12. Qt also ignores the painter's clip in SVG Tiny output (and its SVG 1.1 clip output keeps a
stale clip on later items), so a zoomed plot's curves would spill over the axes.

:func:`portable_svg` rewrites the document so that nothing depends on those features:

- every group of pure geometry (``path``, ``polyline``, ``polygon``, ``line``, ``rect``) gets its
  transform applied to the coordinates themselves (the group's transform is removed), so stroke widths
  and dash lengths are screen pixels in every renderer, and ``vector-effect`` is no longer needed;
- with ``clip``, what is drawn in the plot's data coordinates (groups identified by the linear part
  of their transform, ``data_scale``) is cut to the plot area geometrically: stroked lines segment by
  segment (Liang and Barsky's parametric line clipping), filled areas polygon by polygon
  (Sutherland and Hodgman's re-entrant polygon clipping), scatter-symbol images outside it dropped.
  No ``clip-path`` is needed, so the document stays SVG Tiny 1.2, and renderers without clipping
  support (Qt's own ``QSvgRenderer`` ignores ``clip-path`` on groups) draw it right too.

References: Liang YD, Barsky BA (1984). A new concept and method for line clipping. ACM Transactions
on Graphics 3(1):1-22. Sutherland IE, Hodgman GW (1974). Reentrant polygon clipping. Communications
of the ACM 17(1):32-42.

Groups holding text or images keep their transform (text is positioned, not scaled, by Qt).
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from dataclasses import dataclass

__all__ = ["Affine", "portable_svg", "transform_path_data", "clip_segment", "clip_polygon"]

SVG_NS = "http://www.w3.org/2000/svg"
XLINK_NS = "http://www.w3.org/1999/xlink"
_S = f"{{{SVG_NS}}}"
GEOMETRY = {"path", "polyline", "polygon", "line", "rect"}
_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_TOKEN = re.compile(rf"[A-Za-z]|{_NUMBER}")
_MATRIX = re.compile(rf"^\s*matrix\(\s*({_NUMBER})[\s,]+({_NUMBER})[\s,]+({_NUMBER})[\s,]+({_NUMBER})[\s,]+"
                     rf"({_NUMBER})[\s,]+({_NUMBER})\s*\)\s*$")
# Absolute path commands whose arguments are all coordinate pairs (what Qt writes: M, L, C, Z).
_PAIR_COMMANDS = {"M": 2, "L": 2, "C": 6, "Q": 4, "S": 4, "T": 2}

ET.register_namespace("", SVG_NS)
ET.register_namespace("xlink", XLINK_NS)


@dataclass(frozen=True)
class Affine:
    """The SVG matrix (a, b, c, d, e, f): x' = a x + c y + e, y' = b x + d y + f."""

    a: float = 1.0
    b: float = 0.0
    c: float = 0.0
    d: float = 1.0
    e: float = 0.0
    f: float = 0.0

    @classmethod
    def parse(cls, text: str | None) -> "Affine | None":
        """The matrix of a ``transform="matrix(...)"`` attribute; None for anything else."""
        m = _MATRIX.match(text or "")
        return cls(*(float(v) for v in m.groups())) if m else None

    def apply(self, x: float, y: float) -> tuple[float, float]:
        return self.a * x + self.c * y + self.e, self.b * x + self.d * y + self.f

    def same_scale(self, other: "Affine", rtol: float = 1e-4) -> bool:
        """Same linear part (a, b, c, d) to ``rtol`` of the larger entry (Qt prints 6 digits)."""
        mine, theirs = (self.a, self.b, self.c, self.d), (other.a, other.b, other.c, other.d)
        size = max(max(abs(v) for v in mine), max(abs(v) for v in theirs), 1e-300)
        return all(abs(p - q) <= rtol * size for p, q in zip(mine, theirs))

    @property
    def axis_aligned(self) -> bool:
        return self.b == 0.0 and self.c == 0.0


def _fmt(v: float) -> str:
    text = f"{v:.3f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def transform_path_data(d: str, m: Affine) -> str:
    """Path data ``d`` with absolute commands M, L, C, Q, S, T, Z mapped through ``m``.

    Raises
    ------
    ValueError
        For relative, arc or horizontal/vertical commands (Qt does not write them) or a malformed path.
    """
    tokens = _TOKEN.findall(d)
    out: list[str] = []
    i, command = 0, ""
    while i < len(tokens):
        t = tokens[i]
        if t.isalpha():
            command = t
            out.append(t)
            i += 1
            if t in ("Z", "z"):
                command = ""
            elif t not in _PAIR_COMMANDS:
                raise ValueError(f"path command {t!r} is not supported")
            continue
        if not command:
            raise ValueError(f"number {t!r} without a command in path data")
        n = _PAIR_COMMANDS[command]
        values = tokens[i:i + n]
        if len(values) != n or any(v.isalpha() for v in values):
            raise ValueError(f"command {command!r} needs {n} numbers")
        pairs = [m.apply(float(values[k]), float(values[k + 1])) for k in range(0, n, 2)]
        text = " ".join(f"{_fmt(x)},{_fmt(y)}" for x, y in pairs)
        if out and out[-1] == command:
            out[-1] += text
        else:
            out.append(text)
        i += n
    return " ".join(out)


def _points(text: str, m: Affine) -> str:
    numbers = [float(v) for v in re.findall(_NUMBER, text or "")]
    if len(numbers) % 2:
        raise ValueError("odd number of coordinates in points")
    return " ".join(f"{_fmt(x)},{_fmt(y)}" for x, y in (m.apply(numbers[k], numbers[k + 1])
                                                         for k in range(0, len(numbers), 2)))


def _bake(element: ET.Element, m: Affine) -> ET.Element:
    """``element`` (one of :data:`GEOMETRY`) with ``m`` applied to its coordinates; a rect under a
    rotation or shear becomes a path."""
    tag = element.tag.removeprefix(_S)
    el = element
    if tag == "path":
        el.set("d", transform_path_data(el.get("d", ""), m))
    elif tag in ("polyline", "polygon"):
        el.set("points", _points(el.get("points", ""), m))
    elif tag == "line":
        x1, y1 = m.apply(float(el.get("x1", 0)), float(el.get("y1", 0)))
        x2, y2 = m.apply(float(el.get("x2", 0)), float(el.get("y2", 0)))
        for k, v in (("x1", x1), ("y1", y1), ("x2", x2), ("y2", y2)):
            el.set(k, _fmt(v))
    elif tag == "rect":
        x, y = float(el.get("x", 0)), float(el.get("y", 0))
        w, h = float(el.get("width", 0)), float(el.get("height", 0))
        if m.axis_aligned and not (el.get("rx") or el.get("ry")):
            (x0, y0), (x1, y1) = m.apply(x, y), m.apply(x + w, y + h)
            for k, v in (("x", min(x0, x1)), ("y", min(y0, y1)), ("width", abs(x1 - x0)), ("height", abs(y1 - y0))):
                el.set(k, _fmt(v))
        else:
            corners = [m.apply(px, py) for px, py in ((x, y), (x + w, y), (x + w, y + h), (x, y + h))]
            path = ET.Element(f"{_S}path", {k: v for k, v in el.attrib.items()
                                             if k not in ("x", "y", "width", "height", "rx", "ry")})
            path.set("d", "M " + " L ".join(f"{_fmt(px)},{_fmt(py)}" for px, py in corners) + " Z")
            path.tail = el.tail
            el = path
    el.attrib.pop("vector-effect", None)
    return el


def _is_geometry_only(group: ET.Element) -> bool:
    return all(child.tag.removeprefix(_S) in GEOMETRY for child in group)


Rect = tuple[float, float, float, float]
Point = tuple[float, float]


def clip_segment(p: Point, q: Point, rect: Rect) -> tuple[Point, Point] | None:
    """The part of segment p-q inside ``rect`` (x, y, width, height), or None (Liang-Barsky)."""
    x0, y0, w, h = rect
    dx, dy = q[0] - p[0], q[1] - p[1]
    t0, t1 = 0.0, 1.0
    for step, distance in ((-dx, p[0] - x0), (dx, x0 + w - p[0]), (-dy, p[1] - y0), (dy, y0 + h - p[1])):
        if step == 0:
            if distance < 0:
                return None
            continue
        t = distance / step
        if step < 0:
            t0 = max(t0, t)
        else:
            t1 = min(t1, t)
        if t0 > t1:
            return None
    return (p[0] + t0 * dx, p[1] + t0 * dy), (p[0] + t1 * dx, p[1] + t1 * dy)


def clip_polygon(points: list[Point], rect: Rect) -> list[Point]:
    """``points`` (a closed polygon) cut to ``rect`` (Sutherland-Hodgman, one rectangle side at a time)."""
    x0, y0, w, h = rect
    sides = ((lambda pt: pt[0] >= x0, 0, x0), (lambda pt: pt[0] <= x0 + w, 0, x0 + w),
             (lambda pt: pt[1] >= y0, 1, y0), (lambda pt: pt[1] <= y0 + h, 1, y0 + h))
    out = list(points)
    for inside, axis, edge in sides:
        if not out:
            break
        current, out = out, []
        for i, pt in enumerate(current):
            prev = current[i - 1]
            if inside(pt) != inside(prev):
                t = (edge - prev[axis]) / (pt[axis] - prev[axis])
                out.append((prev[0] + t * (pt[0] - prev[0]), prev[1] + t * (pt[1] - prev[1])))
            if inside(pt):
                out.append(pt)
    return out


def _subpaths(d: str) -> list[tuple[list[Point], bool]] | None:
    """Subpaths of an absolute M/L/Z path as (points, closed); None if it has curves."""
    tokens = _TOKEN.findall(d)
    paths: list[tuple[list[Point], bool]] = []
    i = 0
    while i < len(tokens):
        t = tokens[i]
        if t in ("M", "L"):
            pt = (float(tokens[i + 1]), float(tokens[i + 2]))
            if t == "M" or not paths:
                paths.append(([pt], False))
            else:
                paths[-1][0].append(pt)
            i += 3
        elif t in ("Z", "z"):
            if paths:
                paths[-1] = (paths[-1][0], True)
            i += 1
        elif not t.isalpha() and paths:  # implicit repeat of L
            paths[-1][0].append((float(tokens[i]), float(tokens[i + 1])))
            i += 2
        else:
            return None
    return paths


def _polyline_path(points: list[Point], closed: bool, rect: Rect) -> str:
    """Path data of the parts of a polyline inside ``rect`` (a new subpath after each cut)."""
    pts = points + [points[0]] if closed and len(points) > 1 else points
    out: list[str] = []
    last: Point | None = None
    for p, q in zip(pts, pts[1:]):
        seg = clip_segment(p, q, rect)
        if seg is None:
            last = None
            continue
        a, b = seg
        if last is None or abs(a[0] - last[0]) > 1e-9 or abs(a[1] - last[1]) > 1e-9:
            out.append(f"M{_fmt(a[0])},{_fmt(a[1])}")
        out.append(f"L{_fmt(b[0])},{_fmt(b[1])}")
        last = b
    return " ".join(out)


def _clip_element(el: ET.Element, filled: bool, rect: Rect) -> ET.Element | None:
    """``el`` (baked geometry in document coordinates) cut to ``rect``; None if nothing is left.
    A path with curves, or a rect, is kept whole (Qt writes none in the data area)."""
    tag = el.tag.removeprefix(_S)
    if tag in ("polyline", "polygon"):
        numbers = [float(v) for v in re.findall(_NUMBER, el.get("points", ""))]
        subpaths = [(list(zip(numbers[0::2], numbers[1::2])), tag == "polygon")]
    elif tag == "path":
        subpaths = _subpaths(el.get("d", ""))
        if subpaths is None:
            return el
    else:
        return el
    if filled:
        parts = [clip_polygon(points, rect) for points, _ in subpaths]
        d = " ".join("M" + " L".join(f"{_fmt(x)},{_fmt(y)}" for x, y in part) + " Z" for part in parts if len(part) > 2)
    else:
        d = " ".join(part for part in (_polyline_path(points, closed, rect) for points, closed in subpaths) if part)
    if not d:
        return None
    path = ET.Element(f"{_S}path", {k: v for k, v in el.attrib.items() if k not in ("points", "d")})
    if tag != "path" and not filled:
        path.set("fill", "none")
    path.set("d", d)
    path.tail = el.tail
    return path


def _image_centre(group: ET.Element) -> Point | None:
    m = Affine.parse(group.get("transform")) or Affine()
    image = next((c for c in group if c.tag == f"{_S}image"), None)
    if image is None:
        return None
    x, y = float(image.get("x", 0)), float(image.get("y", 0))
    w, h = float(image.get("width", 0)), float(image.get("height", 0))
    return m.apply(x + w / 2, y + h / 2)


def _inside(pt: Point, rect: Rect, margin: float = 0.5) -> bool:
    x0, y0, w, h = rect
    return x0 - margin <= pt[0] <= x0 + w + margin and y0 - margin <= pt[1] <= y0 + h + margin


def portable_svg(svg: bytes, clip: Rect | None = None, data_scale: Affine | None = None) -> bytes:
    """Rewrite Qt's SVG as described in the module docstring.

    Parameters
    ----------
    svg : the document ``QSvgGenerator`` wrote (UTF-8).
    clip : the plot area (x, y, width, height) in the document's coordinates, or None for no clipping.
    data_scale : the transform from data to document coordinates of the plot's curves; groups whose
        transform has the same linear part are cut to ``clip``.

    Returns
    -------
    bytes
        The rewritten document (UTF-8, with an XML declaration).
    """
    root = ET.fromstring(svg)

    def visit(parent: ET.Element) -> None:
        for child in list(parent):
            if child.tag != f"{_S}g":
                continue
            m = Affine.parse(child.get("transform"))
            in_data = clip is not None and m is not None and data_scale is not None and m.same_scale(data_scale)
            if clip is not None and (centre := _image_centre(child)) is not None:
                if not _inside(centre, clip):
                    parent.remove(child)  # a scatter symbol outside the plot area
                continue
            if m is None or not len(child) or not _is_geometry_only(child):
                visit(child)
                continue
            try:
                baked = [_bake(c, m) for c in list(child)]
            except ValueError:
                continue  # geometry this module cannot rewrite: leave the group as Qt wrote it
            if in_data:
                filled = child.get("fill", "black") != "none"
                baked = [_clip_element(c, filled and c.get("fill") != "none", clip) for c in baked]
            for old in list(child):
                child.remove(old)
            for new in baked:
                if new is not None:
                    child.append(new)
            del child.attrib["transform"]

    visit(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True)
