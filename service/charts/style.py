"""The look shared by every chart: palette, fonts, axes, number formats, and saving.

The palette is our own and is chosen to stay readable in greyscale: every series differs
from its neighbours in lightness and also in marker shape or line style, so a black-and-white
print of a committee pack keeps them apart. No grid clutter, no 3-D, no shadows: the top and
right spines are dropped and a light grid is drawn only along the value axis.
"""

from __future__ import annotations

import io
import math
import threading
import xml.etree.ElementTree as ET
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any, Literal

import matplotlib

matplotlib.use("Agg")  # no display on a server; set before anything else draws

from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import (
    FuncFormatter,
    LogLocator,
    NullFormatter,
    NullLocator,
)

from service.charts.formats import ImageFormat, count, money, probability

# Lightness steps from dark to light, each a different hue (checked in greyscale).
INK = "#1f2d3d"  # text, estimates
SLATE = "#3b5b7e"  # second series (TVaR, attachment)
COPPER = "#b3642b"  # bounds, thresholds to watch
SAND = "#d9b48f"  # light fills of the second series
MIST = "#c3d3e4"  # 95% bands
SMOKE = "#8a939c"  # guide lines (return periods, targets)
ALERT = "#a3242f"  # unreliable figures (also hatched and marked with a cross)

DPI = 110
WIDTH_IN = 7.2
HEIGHT_IN = 3.9

_RC: dict[str, Any] = {
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],  # ships with matplotlib: the same on every machine
    "font.size": 9.5,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "axes.titlesize": 10.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": INK,
    "ytick.color": INK,
    "legend.frameon": False,
    "legend.fontsize": 8.5,
    "svg.fonttype": "none",  # real <text>: searchable, small, and readable by tests
    "svg.hashsalt": "tailgauge",  # stable element ids: the same response, the same bytes
    "path.simplify": True,
}

# matplotlib keeps global state (font cache, rcParams): one figure is drawn at a time.
_LOCK = threading.Lock()

@contextmanager
def drawing() -> Iterator[None]:
    """Hold the drawing lock with our style in force."""
    with _LOCK, matplotlib.rc_context(_RC):  # type: ignore[arg-type]
        yield


def new_figure(*, height_in: float = HEIGHT_IN, width_in: float = WIDTH_IN,
               left_in: float = 0.85, right_in: float = 0.25, top_in: float = 0.4,
               bottom_in: float = 0.6) -> Figure:
    """A figure with fixed margins in inches. A layout engine would measure every label
    first, which doubles the drawing time of a report; our labels are short and known."""
    fig = Figure(figsize=(width_in, height_in), dpi=DPI)
    fig.subplots_adjust(left=left_in / width_in, right=1 - right_in / width_in,
                        top=1 - top_in / height_in, bottom=bottom_in / height_in)
    return fig


def label_width_in(labels: list[str]) -> float:
    """Room for tick labels of these texts at the tick font size (DejaVu Sans averages about
    0.6 em per character)."""
    longest = max((len(text) for text in labels), default=0)
    return 0.2 + longest * 0.6 * 9.5 / 72


def tag_axes(ax: Axes, name: str) -> None:
    """Name the plotting frame so that readers of the SVG (and tests) can find it."""
    ax.set_gid(f"axes-{name}")
    ax.patch.set_gid(f"frame-{name}")


def value_grid(ax: Axes, axis: Literal["x", "y"]) -> None:
    ax.grid(True, axis=axis, color="#e3e6ea", linewidth=0.6)
    ax.set_axisbelow(True)


MONEY_FORMAT = FuncFormatter(money)


PROBABILITY_FORMAT = FuncFormatter(probability)
COUNT_FORMAT = FuncFormatter(count)
HIDDEN = NullFormatter()


def log_axis(ax: Axes, which: Literal["x", "y"], formatter: FuncFormatter) -> None:
    """A log axis with plain labels on the decades and unlabelled minor ticks."""
    axis = ax.xaxis if which == "x" else ax.yaxis
    (ax.set_xscale if which == "x" else ax.set_yscale)("log")
    axis.set_major_formatter(formatter)
    # No minor ticks: the 1-2-5 major ticks read well, and minor ticks were a third of the
    # drawing time of a report.
    axis.set_minor_locator(NullLocator())


def tidy_log_ticks(ax: Axes) -> None:
    """Once the limits are final: 1-2-5 or 1-3 steps on a log axis spanning few decades (so
    a short curve still gets labelled ticks), plain decades on a longer one."""
    for axis, (low, high) in ((ax.xaxis, ax.get_xlim()), (ax.yaxis, ax.get_ylim())):
        if axis.get_scale() != "log" or low <= 0 or high <= 0:
            continue
        decades = abs(math.log10(high / low))
        subs = (1.0, 2.0, 5.0) if decades < 1.2 else (1.0, 3.0) if decades < 2.5 else (1.0,)
        axis.set_major_locator(LogLocator(base=10, subs=subs, numticks=12))


def axis_ranges(fig: Figure) -> dict[str, dict[str, str]]:
    """Axis limits and scales of every tagged axes, written into the SVG as data attributes."""
    ranges: dict[str, dict[str, str]] = {}
    for ax in fig.axes:
        gid = ax.get_gid()
        if not gid:
            continue
        x0, x1 = ax.get_xlim()
        y0, y1 = ax.get_ylim()
        ranges[gid] = {
            "data-x-min": repr(float(min(x0, x1))), "data-x-max": repr(float(max(x0, x1))),
            "data-y-min": repr(float(min(y0, y1))), "data-y-max": repr(float(max(y0, y1))),
            "data-x-scale": ax.get_xscale(), "data-y-scale": ax.get_yscale(),
        }
    return ranges


def _annotate_svg(svg: bytes, ranges: dict[str, dict[str, str]], title: str) -> bytes:
    ET.register_namespace("", "http://www.w3.org/2000/svg")
    ET.register_namespace("xlink", "http://www.w3.org/1999/xlink")
    root = ET.fromstring(svg)
    root.set("role", "img")
    root.set("aria-label", title)
    for element in root.iter():
        gid = element.get("id")
        if gid in ranges:
            for key, value in ranges[gid].items():
                element.set(key, value)
    return bytes(ET.tostring(root, encoding="utf-8", xml_declaration=False))


def save(fig: Figure, fmt: ImageFormat, *, title: str) -> bytes:
    """The figure as SVG (with axis ranges as data attributes) or PNG bytes."""
    buffer = io.BytesIO()
    if fmt == "png":
        fig.savefig(buffer, format="png", metadata={"Title": title, "Software": "tailgauge"})
        return buffer.getvalue()
    # No date in the metadata, so the same response always gives the same bytes.
    fig.savefig(buffer, format="svg", metadata={"Title": title, "Date": None,
                                                 "Creator": "tailgauge"})
    return _annotate_svg(buffer.getvalue(), axis_ranges(fig), title)
