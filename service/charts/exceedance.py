"""Exceedance curve: P(S > x) against the loss x on log axes.

Every figure of a response that is a point of the curve is drawn: exceedance estimates (with
their 95% band, or the rigorous bounds of method recursion drawn as dashed lines), VaR and
return-period losses (the loss at probability 1 - q, with its interval drawn across the loss
axis), the attachment and exhaustion probabilities of layers. Marked return periods (1 in 10,
50, 100, 200, 250 and 1000 years: common practice in reinsurance and solvency reporting) are
dotted guides, with the return-period scale on the right-hand axis.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from pydantic import BaseModel

from service.charts import style
from service.schemas.exceedance import ExceedanceResponse
from service.schemas.layers import LayersResponse
from service.schemas.risk_measures import RiskMeasuresResponse

MARKED_RETURN_PERIODS = (10.0, 50.0, 100.0, 200.0, 250.0, 1000.0)  # common practice


@dataclass(frozen=True)
class CurvePoint:
    x: float
    p: float
    low: float | None  # probability interval (probability-type points)
    high: float | None
    x_low: float | None = None  # loss interval (quantile-type points)
    x_high: float | None = None
    reliable: bool = True


def _probability_points(response: BaseModel) -> list[CurvePoint]:
    if isinstance(response, ExceedanceResponse):
        return [CurvePoint(e.threshold, e.probability, e.ci_low, e.ci_high,
                           reliable=e.diagnostics.reliable)
                for e in response.estimates if e.probability is not None]
    if isinstance(response, RiskMeasuresResponse):
        return [CurvePoint(x.loss, x.probability, x.probability_ci_low, x.probability_ci_high)
                for x in response.loss_return_periods if x.probability is not None]
    if isinstance(response, LayersResponse):
        points: list[CurvePoint] = []
        for ly in response.layers:
            if ly.probability_attach is not None:
                points.append(CurvePoint(ly.attachment, ly.probability_attach,
                                         ly.probability_attach_ci_low,
                                         ly.probability_attach_ci_high))
            if ly.limit is not None and ly.probability_exhaust is not None:
                points.append(CurvePoint(ly.attachment + ly.limit, ly.probability_exhaust,
                                         ly.probability_exhaust_ci_low,
                                         ly.probability_exhaust_ci_high))
        return points
    return []


def _quantile_points(response: BaseModel) -> list[CurvePoint]:
    if not isinstance(response, RiskMeasuresResponse):
        return []
    points = [CurvePoint(m.var, 1.0 - m.level, None, None, m.var_ci_low, m.var_ci_high,
                         m.diagnostics.reliable)
              for m in response.measures if m.var is not None]
    points += [CurvePoint(c.loss, c.probability, None, None, c.loss_ci_low, c.loss_ci_high,
                          c.diagnostics.reliable)
               for c in response.curve if c.loss is not None]
    return points


def applies(response: BaseModel) -> bool:
    return bool(_probability_points(response) or _quantile_points(response))


def _method(response: BaseModel) -> str:
    return str(getattr(response, "method", ""))


def _draw_probabilities(ax: Axes, points: list[CurvePoint], bounds: bool) -> None:
    seen = sorted((pt for pt in points if pt.p > 0), key=lambda pt: pt.x)
    if seen:
        xs = [pt.x for pt in seen]
        low = [pt.low if pt.low is not None else pt.p for pt in seen]
        high = [pt.high if pt.high is not None else pt.p for pt in seen]
        if bounds:
            ax.plot(xs, low, color=style.COPPER, linestyle="--", marker="^", markersize=4,
                    linewidth=1.1, label="lower bound", gid="series-lower-bound")
            ax.plot(xs, high, color=style.COPPER, linestyle="--", marker="v", markersize=4,
                    linewidth=1.1, label="upper bound", gid="series-upper-bound")
        elif len(seen) > 1:
            ax.fill_between(xs, low, high, color=style.MIST, alpha=0.9, linewidth=0,
                            label="95% band", gid="series-band")
        p = np.array([pt.p for pt in seen])
        # Whiskers too: a band between two points is invisible at a single threshold.
        container = ax.errorbar(
            xs, p, yerr=np.vstack([p - np.array(low), np.array(high) - p]), color=style.INK,
            marker="o", markersize=4.5, linewidth=1.4, elinewidth=1.0, capsize=3,
            label="estimate" + ("" if bounds else " with 95% interval"))
        container.lines[0].set_gid("series-estimate")
    unseen = [pt for pt in points if pt.p <= 0 and pt.high]
    if unseen:
        ax.plot([pt.x for pt in unseen], [pt.high or 0.0 for pt in unseen], linestyle="none",
                marker="v", markersize=6, markerfacecolor="white", color=style.INK,
                label="nothing observed: upper bound", gid="series-no-hits")


def _draw_quantiles(ax: Axes, points: list[CurvePoint], bounds: bool) -> None:
    xs = np.array([pt.x for pt in points])
    left = xs - np.array([pt.x_low if pt.x_low is not None else pt.x for pt in points])
    right = np.array([pt.x_high if pt.x_high is not None else pt.x for pt in points]) - xs
    container = ax.errorbar(
        xs, [pt.p for pt in points], xerr=np.vstack([left, right]), linestyle="none",
        marker="s", markersize=5, color=style.SLATE, ecolor=style.SLATE, elinewidth=1.2,
        capsize=3, label="VaR / return-period loss" + (" (bounds)" if bounds else " (95%)"),
    )
    container.lines[0].set_gid("series-quantiles")


def _draw_unreliable(ax: Axes, points: list[CurvePoint]) -> None:
    bad = [pt for pt in points if not pt.reliable and pt.p > 0]
    if bad:
        ax.plot([pt.x for pt in bad], [pt.p for pt in bad], linestyle="none", marker="x",
                markersize=9, markeredgewidth=1.8, color=style.ALERT,
                label="flagged unreliable", gid="series-unreliable")


def _limits(ax: Axes, points: list[CurvePoint], log_x: bool) -> None:
    ps = [v for pt in points for v in (pt.p, pt.low, pt.high) if v is not None and v > 0]
    xs = [v for pt in points for v in (pt.x, pt.x_low, pt.x_high) if v is not None]
    if ps:
        top, bottom = max(ps), min(ps)
        # Show the marked return periods when the data are within two decades of them.
        top = max(top, 0.1) if top > 1e-3 else top
        bottom = min(bottom, 1e-3) if bottom < 1.0 else bottom
        ax.set_ylim(bottom / 2.0, min(1.0, top * 2.0) if top < 1 else top * 1.2)
    if xs and log_x:
        ax.set_xlim(min(xs) / 1.6, max(xs) * 1.6)
    elif xs:
        span = (max(xs) - min(xs)) or abs(max(xs)) or 1.0
        ax.set_xlim(min(xs) - 0.08 * span, max(xs) + 0.08 * span)


def _guides(ax: Axes) -> None:
    bottom, top = ax.get_ylim()
    for k, period in enumerate(MARKED_RETURN_PERIODS):
        p = 1.0 / period
        if bottom <= p <= top:
            ax.axhline(p, color=style.SMOKE, linestyle=":", linewidth=0.8,
                       gid=f"guide-rp-{period:g}")
            # Labels alternate sides: 1 in 200 and 1 in 250 sit close together.
            side = float(k % 2)
            ax.annotate(f"1 in {period:g}", xy=(side, p), xycoords=("axes fraction", "data"),
                        xytext=(-3 if side else 3, 2), textcoords="offset points",
                        ha="right" if side else "left", fontsize=7.5, color=style.SMOKE)


def draw(response: BaseModel) -> Figure:
    bounds = _method(response) == "recursion"
    prob = _probability_points(response)
    quant = _quantile_points(response)
    everything = prob + quant
    fig = style.new_figure()
    ax = fig.add_subplot()
    style.tag_axes(ax, "exceedance")
    log_x = all(pt.x > 0 for pt in everything) and bool(everything)
    _draw_probabilities(ax, prob, bounds)
    if quant:
        _draw_quantiles(ax, quant, bounds)
    _draw_unreliable(ax, everything)
    if log_x:
        style.log_axis(ax, "x", style.MONEY_FORMAT)
    else:
        ax.xaxis.set_major_formatter(style.MONEY_FORMAT)
    if any(v is not None and v > 0 for pt in everything for v in (pt.p, pt.high)):
        style.log_axis(ax, "y", style.PROBABILITY_FORMAT)
        _limits(ax, everything, log_x)
        _guides(ax)
    else:
        _limits(ax, everything, log_x)
    ax.set_xlabel("loss x per period (money units)")
    ax.set_ylabel("exceedance probability P(S > x)")
    ax.set_title("Exceedance curve")
    style.value_grid(ax, "y")
    if everything:
        ax.legend(loc="upper right")
    else:
        ax.text(0.5, 0.5, "no finite figure to draw", transform=ax.transAxes, ha="center")
    return fig
