"""The reliability strip: every headline figure's relative error on one log axis, with the
figures whose error bar the diagnostics do not trust drawn hatched, in the alert colour and
marked "unreliable", so an untrustworthy number is visible at a glance."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from pydantic import BaseModel

from service.charts import style
from service.charts.readings import readings

NOTE_FOR_NONE = "no sampling error (deterministic) or no estimate"


def applies(response: BaseModel) -> bool:
    return bool(readings(response))


def draw(response: BaseModel) -> Figure:
    rows = readings(response)
    names = [r.label + " *" for r in rows]
    fig = style.new_figure(height_in=max(2.0, 1.1 + 0.3 * len(rows)),
                           left_in=style.label_width_in(names), right_in=0.9)
    ax = fig.add_subplot()
    style.tag_axes(ax, "reliability")
    y = np.arange(len(rows), dtype=float)
    measured = [i for i, r in enumerate(rows) if r.relative_error is not None
                and r.relative_error > 0]
    floor = min((rows[i].relative_error or 1.0 for i in measured), default=1e-3) / 3
    for flag, name in ((True, "reliable"), (False, "unreliable")):
        idx = [i for i in measured if rows[i].reliable is flag]
        if not idx:
            continue
        widths = [(rows[i].relative_error or 0.0) for i in idx]
        bars = ax.barh(y[idx], [w - floor for w in widths], left=floor, height=0.6,
                       color=style.MIST if flag else "white",
                       edgecolor=style.SLATE if flag else style.ALERT,
                       hatch=None if flag else "///", linewidth=1.0,
                       label="reliable" if flag else "flagged unreliable")
        for i, patch in zip(idx, bars.patches, strict=True):
            patch.set_gid(f"bar-{name}-{i}")
        marks = ax.plot(widths, y[idx], linestyle="none", marker="o" if flag else "x",
                        markersize=5 if flag else 8, markeredgewidth=1.6,
                        color=style.INK if flag else style.ALERT)
        marks[0].set_gid(f"series-{name}")
    for i, r in enumerate(rows):
        if not r.reliable:
            ax.annotate("unreliable", xy=(1.0, y[i]), xycoords=("axes fraction", "data"),
                        xytext=(4, 0), textcoords="offset points", ha="left", va="center",
                        fontsize=8, color=style.ALERT, fontweight="bold")
        if i not in measured:
            ax.annotate(NOTE_FOR_NONE, xy=(0.0, y[i]), xycoords=("axes fraction", "data"),
                        xytext=(4, 0), textcoords="offset points", va="center", fontsize=7.5,
                        color=style.SMOKE)
    style.log_axis(ax, "x", style.PROBABILITY_FORMAT)
    top = max((rows[i].relative_error or 0.0 for i in measured), default=1.0)
    ax.set_xlim(floor, max(top * 3, floor * 30))
    ax.set_yticks(y, [r.label + (" *" if r.basis == "interval" else "") for r in rows])
    ax.invert_yaxis()
    ax.set_xlabel("relative error (standard error / estimate; * from the 95% interval)")
    ax.set_title("Reliability of each figure")
    style.value_grid(ax, "x")
    return fig
