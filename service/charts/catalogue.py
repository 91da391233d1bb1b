"""The drawing of each chart kind: its ``applies`` test and its ``draw`` function (matplotlib).

Imported on the first chart drawn, not at the service's start (service.charts).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from matplotlib.figure import Figure
from pydantic import BaseModel

from service.charts import (
    CHART_KINDS,
    Chart,
    contributions,
    exceedance,
    layers,
    measures,
    reliability,
    ruin,
    style,
)
from service.charts.formats import ImageFormat


@dataclass(frozen=True)
class Drawing:
    applies: Callable[[BaseModel], bool]
    draw: Callable[[BaseModel], Figure]


DRAWINGS: dict[str, Drawing] = {
    "exceedance": Drawing(exceedance.applies, exceedance.draw),
    "var_tvar": Drawing(measures.applies, measures.draw),
    "layers": Drawing(layers.applies, layers.draw),
    "ruin": Drawing(ruin.applies, ruin.draw),
    "contributions": Drawing(contributions.applies, contributions.draw),
    "reliability": Drawing(reliability.applies, reliability.draw),
}
assert tuple(DRAWINGS) == CHART_KINDS


def draw(chart: Chart, response: BaseModel, fmt: ImageFormat) -> bytes:
    with style.drawing():
        figure = DRAWINGS[chart.name].draw(response)
        for ax in figure.axes:
            style.tidy_log_ticks(ax)
        return style.save(figure, fmt, title=chart.title)
