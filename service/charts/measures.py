"""Value-at-risk and tail value-at-risk by confidence level, each with its 95% interval (or
the rigorous bounds of method recursion)."""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from pydantic import BaseModel

from service.charts import formats, style
from service.schemas.risk_measures import RiskMeasuresResponse

OFFSET = 0.12  # VaR left of the level, TVaR right of it, so the intervals do not overlap


def applies(response: BaseModel) -> bool:
    return isinstance(response, RiskMeasuresResponse) and any(
        m.var is not None or m.tvar is not None for m in response.measures)


def _series(ax: Axes, x: np.ndarray, values: list[float | None], lows: list[float | None],
            highs: list[float | None], *, label: str, gid: str, marker: str, color: str,
            face: str) -> None:
    keep = [i for i, v in enumerate(values) if v is not None]
    if not keep:
        return
    v = np.array([values[i] for i in keep], dtype=float)
    lo = np.array([lows[i] if lows[i] is not None else values[i] for i in keep], dtype=float)
    hi = np.array([highs[i] if highs[i] is not None else values[i] for i in keep], dtype=float)
    container = ax.errorbar(x[keep], v, yerr=np.vstack([v - lo, hi - v]), linestyle="none",
                            marker=marker, markersize=7, color=color, markerfacecolor=face,
                            ecolor=color, elinewidth=1.3, capsize=4, label=label)
    container.lines[0].set_gid(gid)


def draw(response: BaseModel) -> Figure:
    assert isinstance(response, RiskMeasuresResponse)
    measures = response.measures
    band = "bounds" if response.method == "recursion" else "95% interval"
    fig = style.new_figure(bottom_in=0.85)
    ax = fig.add_subplot()
    style.tag_axes(ax, "measures")
    x = np.arange(len(measures), dtype=float)
    _series(ax, x - OFFSET, [m.var for m in measures], [m.var_ci_low for m in measures],
            [m.var_ci_high for m in measures], label=f"VaR ({band})", gid="series-var",
            marker="s", color=style.INK, face=style.INK)
    _series(ax, x + OFFSET, [m.tvar for m in measures], [m.tvar_ci_low for m in measures],
            [m.tvar_ci_high for m in measures], label=f"TVaR ({band})", gid="series-tvar",
            marker="D", color=style.COPPER, face="white")
    bad = [i for i, m in enumerate(measures) if not m.diagnostics.reliable]
    if bad:
        ax.plot(x[bad], [max(v for v in (measures[i].var, measures[i].tvar) if v is not None)
                         for i in bad], linestyle="none", marker="x", markersize=10,
                markeredgewidth=1.8, color=style.ALERT, label="flagged unreliable",
                gid="series-unreliable")
    ax.set_xticks(x, [f"{formats.percent(m.level)}\n{formats.return_period(1 - m.level)}"
                      for m in measures])
    ax.set_xlim(-0.6, len(measures) - 0.4)
    ax.yaxis.set_major_formatter(style.MONEY_FORMAT)
    ax.set_xlabel("confidence level q (return period)")
    ax.set_ylabel("loss per period (money units)")
    ax.set_title("Value-at-risk and tail value-at-risk")
    ax.margins(y=0.15)
    style.value_grid(ax, "y")
    ax.legend(loc="upper left")
    return fig
