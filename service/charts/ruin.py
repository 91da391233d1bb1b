"""Ruin probability psi(u) against the initial capital u: the estimates with their 95% band
(or rigorous bounds), the classical approximation for comparison, and the capital for the
target when one was asked for."""

from __future__ import annotations

from matplotlib.figure import Figure
from pydantic import BaseModel

from service.charts import formats, style
from service.schemas.ruin import RuinResponse


def applies(response: BaseModel) -> bool:
    return isinstance(response, RuinResponse) and any(
        e.probability is not None for e in response.estimates)


def draw(response: BaseModel) -> Figure:
    assert isinstance(response, RuinResponse)
    bounds = response.method == "recursion"
    points = sorted((e for e in response.estimates if e.probability is not None),
                    key=lambda e: e.capital)
    fig = style.new_figure()
    ax = fig.add_subplot()
    style.tag_axes(ax, "ruin")
    u = [e.capital for e in points]
    p = [e.probability or 0.0 for e in points]
    low = [e.ci_low if e.ci_low is not None else q for e, q in zip(points, p, strict=True)]
    high = [e.ci_high if e.ci_high is not None else q for e, q in zip(points, p, strict=True)]
    if bounds:
        ax.plot(u, low, color=style.COPPER, linestyle="--", marker="^", markersize=4,
                label="lower bound", gid="series-lower-bound")
        ax.plot(u, high, color=style.COPPER, linestyle="--", marker="v", markersize=4,
                label="upper bound", gid="series-upper-bound")
    else:
        ax.fill_between(u, low, high, color=style.MIST, linewidth=0, label="95% band",
                        gid="series-band")
    ax.plot(u, p, color=style.INK, marker="o", markersize=4.5, linewidth=1.4,
            label="psi(u) estimate", gid="series-estimate")
    approx = [(e.capital, e.approximation) for e in points
              if e.approximation is not None and e.approximation > 0]
    if approx:
        ax.plot([a for a, _ in approx], [b for _, b in approx], color=style.SLATE,
                linestyle="-.", linewidth=1.1, label="classical approximation",
                gid="series-approximation")
    bad = [(e.capital, e.probability or 0.0) for e in points if not e.diagnostics.reliable]
    if bad:
        ax.plot([a for a, _ in bad], [b for _, b in bad], linestyle="none", marker="x",
                markersize=9, markeredgewidth=1.8, color=style.ALERT,
                label="flagged unreliable", gid="series-unreliable")
    if any(v > 0 for v in p + high):
        style.log_axis(ax, "y", style.PROBABILITY_FORMAT)
    target = response.capital_for_target
    if target is not None:
        ax.axhline(target.target, color=style.SMOKE, linestyle=":", linewidth=1.0,
                   gid="guide-target")
        if target.ci_low is not None and target.ci_high is not None:
            ax.axvspan(target.ci_low, target.ci_high, color=style.SAND, alpha=0.45,
                       linewidth=0, gid="guide-capital-interval")
        if target.capital is not None:
            ax.axvline(target.capital, color=style.COPPER, linewidth=1.0, gid="guide-capital")
            ax.annotate(f"capital for {target.target:g}: {formats.money(target.capital)}",
                        xy=(target.capital, target.target), xytext=(6, 6),
                        textcoords="offset points", fontsize=8, color=style.INK)
    ax.xaxis.set_major_formatter(style.MONEY_FORMAT)
    horizon = "ever" if response.horizon is None else f"by time {response.horizon:g}"
    ax.set_xlabel("initial capital u (money units)")
    ax.set_ylabel(f"ruin probability psi(u), {horizon}")
    ax.set_title("Ruin probability by capital")
    style.value_grid(ax, "y")
    ax.legend(loc="upper right")
    return fig
