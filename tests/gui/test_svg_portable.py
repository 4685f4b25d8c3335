"""gui.svg_portable: the rewrite of Qt's SVG for renderers without non-scaling strokes or clipping
(issue 12 item 1). Pure XML; expected values worked out by hand from the definitions."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import pytest

from gui.svg_portable import Affine, clip_polygon, clip_segment, portable_svg, transform_path_data

S = "{http://www.w3.org/2000/svg}"


def test_transform_path_data_maps_every_coordinate_pair():
    m = Affine(2, 0, 0, -3, 10, 100)  # x' = 2x + 10, y' = -3y + 100
    assert transform_path_data("M0,1 L2,3 C1,1 2,2 3,3 Z", m) == "M10,97 L14,91 C12,97 14,94 16,91 Z"
    with pytest.raises(ValueError, match="'A'"):
        transform_path_data("M0,0 A1,1 0 0 1 2,2", m)


def test_clip_segment_liang_barsky():
    rect = (0.0, 0.0, 10.0, 10.0)
    assert clip_segment((-5, 5), (15, 5), rect) == ((0, 5), (10, 5))
    assert clip_segment((2, 2), (3, 3), rect) == ((2, 2), (3, 3))
    assert clip_segment((-5, -5), (-1, 20), rect) is None
    (a, b) = clip_segment((-10, 0), (10, 20), rect)  # the diagonal y = x + 10 enters at (0, 10)
    assert a == pytest.approx((0, 10)) and b == pytest.approx((0, 10))


def test_clip_polygon_sutherland_hodgman_area():
    square = [(-5.0, -5.0), (5.0, -5.0), (5.0, 5.0), (-5.0, 5.0)]
    part = clip_polygon(square, (0.0, 0.0, 10.0, 10.0))
    area = 0.5 * abs(sum(x0 * y1 - x1 * y0 for (x0, y0), (x1, y1) in zip(part, part[1:] + part[:1])))
    assert area == pytest.approx(25.0)  # the quarter of the square inside
    assert clip_polygon(square, (20.0, 20.0, 1.0, 1.0)) == []


SVG_DOC = b"""<?xml version="1.0" encoding="UTF-8" standalone="no"?>
<svg width="100mm" height="100mm" viewBox="0 0 100 100" xmlns="http://www.w3.org/2000/svg"
 xmlns:xlink="http://www.w3.org/1999/xlink" version="1.2" baseProfile="tiny">
<g fill="none" stroke="#d55e00" stroke-width="2" transform="matrix(10,0,0,-100,10,90)">
<path vector-effect="non-scaling-stroke" fill-rule="evenodd" d="M0,0 L4,0.5 L12,0.9"/>
</g>
<g fill="#0072b2" stroke="none" transform="matrix(10,0,0,-100,10,90)">
<path vector-effect="non-scaling-stroke" d="M0,0 L12,0 L12,1 L0,1 Z"/>
</g>
<g fill="none" stroke="#000000" transform="matrix(1,0,0,1,0,95)"><text x="0" y="0">label</text></g>
<g fill="none" stroke="#009e73" transform="matrix(6,0,0,6,5,5)">
<path vector-effect="non-scaling-stroke" d="M-0.5,-0.5 L0.5,-0.5 L0.5,0.5 L-0.5,0.5 Z"/></g>
<g transform="matrix(1,0,0,1,200,10)"><image x="-3" y="-3" width="6" height="6" xlink:href="data:,"/></g>
<g transform="matrix(1,0,0,1,40,40)"><image x="-3" y="-3" width="6" height="6" xlink:href="data:,"/></g>
</svg>"""


def test_portable_svg_bakes_transforms_and_cuts_the_data_to_the_plot_area():
    out = ET.fromstring(portable_svg(SVG_DOC, clip=(10.0, 0.0, 80.0, 90.0), data_scale=Affine(10, 0, 0, -100, 0, 0)))
    assert out.get("baseProfile") == "tiny"
    groups = [g for g in out.iter(f"{S}g")]
    curve, band, text, marker = groups[0], groups[1], groups[2], groups[3]
    # the curve: baked (x' = 10x + 10, y' = 90 - 100y) and cut at x' = 90 (x = 8, y = 0.5 + 0.05 * 4)
    assert curve.get("transform") is None
    assert curve[0].get("d") == "M10,90 L50,40 L90,20"
    assert curve[0].get("vector-effect") is None and curve.get("stroke-width") == "2"
    # the band: filled, so cut as a polygon to the plot area
    xs = [float(p.split(",")[0]) for p in band[0].get("d").replace("M", "").replace("Z", "").split(" L")]
    assert min(xs) == 10 and max(xs) == 90
    # text keeps its transform; a marker outside the data area is baked, not cut
    assert text.get("transform") == "matrix(1,0,0,1,0,95)"
    assert marker.get("transform") is None and marker[0].get("d").startswith("M2,2 L8,2")
    # scatter-symbol images: the one outside the plot area is dropped
    images = list(out.iter(f"{S}image"))
    assert len(images) == 1


def test_portable_svg_without_a_plot_area_only_bakes():
    out = ET.fromstring(portable_svg(SVG_DOC))
    assert len(list(out.iter(f"{S}image"))) == 2
    assert next(out.iter(f"{S}path")).get("d") == "M10,90 L50,40 L130,0"
