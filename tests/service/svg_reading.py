"""Reading our charts' SVG back: series, frames with their axis ranges, marker positions."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from dataclasses import dataclass

SVG = "{http://www.w3.org/2000/svg}"
_NUMBER = re.compile(r"-?\d+(?:\.\d+)?(?:e-?\d+)?")


@dataclass(frozen=True)
class Frame:
    x_min: float
    x_max: float
    y_min: float
    y_max: float
    x_scale: str
    y_scale: str
    box: tuple[float, float, float, float]  # pixel left, top, right, bottom of the plot area

    def holds_x(self, value: float) -> bool:
        return self.x_min <= value <= self.x_max

    def holds_y(self, value: float) -> bool:
        return self.y_min <= value <= self.y_max


def parse(svg: bytes) -> ET.Element:
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG}svg"
    return root


def series(root: ET.Element) -> dict[str, ET.Element]:
    return {el.get("id", ""): el for el in root.iter()
            if el.get("id", "").startswith("series-")}


def frame(root: ET.Element, name: str) -> Frame:
    axes = next(el for el in root.iter() if el.get("id") == f"axes-{name}")
    patch = next(el for el in root.iter() if el.get("id") == f"frame-{name}")
    d = next(p for p in patch.iter(f"{SVG}path")).get("d", "")
    values = [float(v) for v in _NUMBER.findall(d)]
    xs, ys = values[0::2], values[1::2]
    return Frame(
        x_min=float(axes.get("data-x-min", "nan")), x_max=float(axes.get("data-x-max", "nan")),
        y_min=float(axes.get("data-y-min", "nan")), y_max=float(axes.get("data-y-max", "nan")),
        x_scale=axes.get("data-x-scale", ""), y_scale=axes.get("data-y-scale", ""),
        box=(min(xs), min(ys), max(xs), max(ys)),
    )


def markers(element: ET.Element) -> list[tuple[float, float]]:
    """Pixel positions of the markers drawn by one series (matplotlib draws each as <use>)."""
    return [(float(u.get("x", "nan")), float(u.get("y", "nan")))
            for u in element.iter(f"{SVG}use")]


def inside(point: tuple[float, float], box: tuple[float, float, float, float]) -> bool:
    left, top, right, bottom = box
    x, y = point
    return left - 0.5 <= x <= right + 0.5 and top - 0.5 <= y <= bottom + 0.5
