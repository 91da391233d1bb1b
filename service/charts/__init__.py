"""Charts of computed responses, drawn with matplotlib (Agg) as SVG or PNG bytes.

One module per kind of chart, each with ``applies(response) -> bool`` and ``draw(response)
-> Figure``; everything here is a pure function of a response schema object. ``render`` is
the one entry point (it imports matplotlib on first use, service.charts.catalogue)::

    render("exceedance", ExceedanceResponse(...), "svg") -> b"<svg ..."

Series carry SVG ids ``series-<name>`` and every plotting frame ``axes-<name>`` with its
axis limits as ``data-x-min`` ... attributes, so that readers (and tests) can find them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal, get_args

from pydantic import BaseModel

from service.charts.formats import MEDIA_TYPES, ImageFormat

ChartKind = Literal["exceedance", "var_tvar", "layers", "ruin", "contributions", "reliability"]
CHART_KINDS: tuple[str, ...] = get_args(ChartKind)
IMAGE_FORMATS: tuple[str, ...] = get_args(ImageFormat)


@dataclass(frozen=True)
class Chart:
    name: str
    title: str
    caption: str  # what the chart shows, for a figure caption


CHARTS: dict[str, Chart] = {
    chart.name: chart
    for chart in (
        Chart("exceedance", "Exceedance curve",
              "P(S > x) against the loss x on log axes, with 95% intervals (rigorous bounds "
              "for method recursion); dotted lines mark the 1-in-10 to 1-in-1000 year return "
              "periods (common practice)."),
        Chart("var_tvar", "Value-at-risk and tail value-at-risk",
              "VaR and TVaR at each confidence level with their 95% intervals."),
        Chart("layers", "Layer losses and probabilities",
              "Expected loss to each aggregate layer, and the probabilities that it is hit "
              "and used up; hatched bars are flagged unreliable."),
        Chart("ruin", "Ruin probability by capital",
              "psi(u) against the initial capital u, with the classical approximation and the "
              "capital for the target when asked."),
        Chart("contributions", "Contributions to TVaR",
              "Euler contributions of each obligor group to TVaR per level (they add up to "
              "TVaR), with 95% intervals."),
        Chart("reliability", "Reliability of each figure",
              "Relative error of every figure; hatched bars marked unreliable are figures "
              "whose error bar the diagnostics do not trust."),
    )
}
assert tuple(CHARTS) == CHART_KINDS


def kinds_for(response: BaseModel) -> list[str]:
    """The chart kinds that have something to show for this response, in display order."""
    from service.charts.catalogue import DRAWINGS

    return [name for name in CHARTS if DRAWINGS[name].applies(response)]


class ChartNotApplicable(ValueError):
    """The response holds nothing this kind of chart could show."""

    def __init__(self, kind: str, available: list[str]) -> None:
        listed = ", ".join(available) if available else "none"
        super().__init__(f"a '{kind}' chart has nothing to show for this result; kinds "
                         f"available here: {listed}")
        self.kind = kind
        self.available = available


def render(kind: str, response: BaseModel, fmt: ImageFormat = "svg") -> bytes:
    """The chart of ``kind`` for ``response`` as SVG or PNG bytes."""
    from service.charts.catalogue import DRAWINGS, draw

    if not DRAWINGS[kind].applies(response):
        raise ChartNotApplicable(kind, kinds_for(response))
    return draw(CHARTS[kind], response, fmt)


__all__ = ["CHARTS", "CHART_KINDS", "IMAGE_FORMATS", "MEDIA_TYPES", "Chart", "ChartKind",
           "ChartNotApplicable", "ImageFormat", "kinds_for", "render"]
