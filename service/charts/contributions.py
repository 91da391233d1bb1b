"""Euler contributions of each line to TVaR, per confidence level (dependent portfolios).

A risk-measures response of a dependent portfolio carries, per level, ``contributions:
[{label, tvar_contribution, ci_low, ci_high}]`` (Euler allocation: they add up to TVaR).
The chart shows them as grouped horizontal bars with their 95% intervals.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from matplotlib.figure import Figure
from pydantic import BaseModel

from service.charts import formats, style
from service.schemas.risk_measures import MeasureOut, RiskMeasuresResponse

if TYPE_CHECKING:  # imported for the annotation only: service.schemas.credit must be
    # imported through service.schemas.common first (the two refer to each other)
    from service.schemas.credit import ContributionOut

# Fill and hatch per level: told apart in greyscale by lightness and pattern.
_LOOKS = ((style.SLATE, None), (style.SAND, "..."), (style.MIST, "//"), ("white", "xx"))


def contributions_of(measure: MeasureOut) -> list[ContributionOut]:
    """The measure's Euler contributions; empty for a portfolio of claim lines."""
    return list(measure.contributions)


def applies(response: BaseModel) -> bool:
    return isinstance(response, RiskMeasuresResponse) and any(
        contributions_of(m) for m in response.measures)


def _labels(measures: list[MeasureOut]) -> list[str]:
    names: list[str] = []
    for m in measures:
        for i, c in enumerate(contributions_of(m)):
            name = c.label or f"line {i}"
            if name not in names:
                names.append(name)
    return names


def draw(response: BaseModel) -> Figure:
    assert isinstance(response, RiskMeasuresResponse)
    measures = [m for m in response.measures if contributions_of(m)]
    names = _labels(measures)
    fig = style.new_figure(height_in=max(2.8, 1.2 + 0.3 * len(names) * len(measures)),
                           left_in=style.label_width_in(names))
    ax = fig.add_subplot()
    style.tag_axes(ax, "contributions")
    height = 0.8 / len(measures)
    y = np.arange(len(names), dtype=float)
    for k, m in enumerate(measures):
        by_name = {(c.label or f"line {i}"): c for i, c in enumerate(contributions_of(m))}
        rows = [i for i, n in enumerate(names)
                if n in by_name and by_name[n].tvar_contribution is not None]
        values = np.array([by_name[names[i]].tvar_contribution for i in rows], dtype=float)
        lows = np.array([by_name[names[i]].ci_low if by_name[names[i]].ci_low is not None
                         else by_name[names[i]].tvar_contribution for i in rows], dtype=float)
        highs = np.array([by_name[names[i]].ci_high if by_name[names[i]].ci_high is not None
                          else by_name[names[i]].tvar_contribution for i in rows], dtype=float)
        color, hatch = _LOOKS[k % len(_LOOKS)]
        offset = (k - (len(measures) - 1) / 2) * height
        bars = ax.barh(y[rows] + offset, values, height=height * 0.9, color=color,
                       hatch=hatch, edgecolor=style.INK, linewidth=0.6,
                       label=f"TVaR {formats.percent(m.level)}")
        for j, patch in zip(rows, bars.patches, strict=True):
            patch.set_gid(f"bar-contribution-{k}-{j}")
        container = ax.errorbar(values, y[rows] + offset,
                                xerr=np.vstack([values - lows, highs - values]),
                                linestyle="none", marker="|", color=style.INK,
                                elinewidth=1.1, capsize=2.5)
        container.lines[0].set_gid(f"series-contribution-{k}")
    ax.set_yticks(y, names)
    ax.invert_yaxis()
    ax.axvline(0.0, color=style.INK, linewidth=0.8)
    ax.xaxis.set_major_formatter(style.MONEY_FORMAT)
    ax.set_xlabel("contribution to TVaR (money units; Euler allocation: they add up to TVaR)")
    ax.set_title("Contributions to tail value-at-risk")
    style.value_grid(ax, "x")
    ax.legend(loc="lower right")
    return fig
