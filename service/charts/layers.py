"""Aggregate layers: expected loss to each layer (bars with 95% intervals) beside the
probabilities that the layer is hit (attachment) and used up (exhaustion), on a log scale."""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from pydantic import BaseModel

from service.charts import formats, style
from service.schemas.layers import LayerOut, LayersResponse

OFFSET = 0.14


def applies(response: BaseModel) -> bool:
    return isinstance(response, LayersResponse) and bool(response.layers)


def layer_name(layer: LayerOut) -> str:
    """'15M xs 10M' (limit xs attachment, the trade's way of naming a layer)."""
    width = "unlimited" if layer.limit is None else formats.money(layer.limit)
    return f"{width} xs {formats.money(layer.attachment)}"


def _whiskers(values: list[float | None], lows: list[float | None],
              highs: list[float | None]) -> tuple[list[int], np.ndarray, np.ndarray]:
    keep = [i for i, v in enumerate(values) if v is not None]
    v = np.array([values[i] for i in keep], dtype=float)
    lo = np.array([lows[i] if lows[i] is not None else values[i] for i in keep], dtype=float)
    hi = np.array([highs[i] if highs[i] is not None else values[i] for i in keep], dtype=float)
    return keep, v, np.vstack([v - lo, hi - v])


def _losses(ax: Axes, layers: list[LayerOut], y: np.ndarray) -> None:
    keep, v, err = _whiskers([ly.expected_loss for ly in layers],
                             [ly.expected_loss_ci_low for ly in layers],
                             [ly.expected_loss_ci_high for ly in layers])
    for i in keep:
        ly = layers[i]
        reliable = ly.diagnostics.reliable
        bar = ax.barh(y[i], ly.expected_loss or 0.0, height=0.55,
                      color=style.MIST if reliable else "white",
                      edgecolor=style.SLATE if reliable else style.ALERT,
                      hatch=None if reliable else "///", linewidth=1.0)
        bar.patches[0].set_gid(f"bar-expected-loss-{i}")
    if keep:
        container = ax.errorbar(v, y[keep], xerr=err, linestyle="none", marker="|",
                                markersize=8, color=style.INK, elinewidth=1.3, capsize=3,
                                label="expected loss, 95% interval")
        container.lines[0].set_gid("series-expected-loss")
    ax.set_yticks(y, [layer_name(ly) for ly in layers])
    ax.invert_yaxis()
    ax.xaxis.set_major_formatter(style.MONEY_FORMAT)
    ax.set_xlabel("expected loss per period (money units)")
    ax.set_xlim(left=0)
    ax.margins(x=0.08)
    ax.set_title("Expected layer loss")
    style.value_grid(ax, "x")


def _probabilities(ax: Axes, layers: list[LayerOut], y: np.ndarray) -> None:
    spec = (
        ("attach", "P(hit): S > attachment", "o", style.INK, style.INK, -OFFSET,
         [ly.probability_attach for ly in layers],
         [ly.probability_attach_ci_low for ly in layers],
         [ly.probability_attach_ci_high for ly in layers]),
        ("exhaust", "P(used up): S > attachment + limit", "v", style.COPPER, "white", OFFSET,
         [ly.probability_exhaust for ly in layers],
         [ly.probability_exhaust_ci_low for ly in layers],
         [ly.probability_exhaust_ci_high for ly in layers]),
    )
    for name, label, marker, color, face, shift, values, lows, highs in spec:
        # A probability of 0 cannot sit on a log axis: its one-sided bound is drawn instead.
        shown = [v if v else h for v, h in zip(values, highs, strict=True)]
        keep = [i for i, v in enumerate(shown) if v is not None and v > 0]
        if not keep:
            continue
        v = np.array([shown[i] for i in keep], dtype=float)
        lo = np.array([lows[i] or shown[i] for i in keep], dtype=float)
        hi = np.array([highs[i] if highs[i] is not None else shown[i] for i in keep],
                      dtype=float)
        container = ax.errorbar(v, y[keep] + shift, xerr=np.vstack([v - lo, hi - v]),
                                linestyle="none", marker=marker, markersize=6, color=color,
                                markerfacecolor=face, elinewidth=1.2, capsize=3, label=label)
        container.lines[0].set_gid(f"series-{name}")
    style.log_axis(ax, "x", style.PROBABILITY_FORMAT)
    ax.set_yticks(y, ["" for _ in layers])
    ax.tick_params(axis="y", left=False)
    ax.invert_yaxis()
    ax.set_xlabel("probability per period")
    ax.set_title("Hit and used up")
    style.value_grid(ax, "x")


def draw(response: BaseModel) -> Figure:
    assert isinstance(response, LayersResponse)
    layers = response.layers
    names = [layer_name(ly) for ly in layers]
    fig = style.new_figure(height_in=max(2.8, 1.9 + 0.5 * len(layers)), bottom_in=1.0,
                           left_in=style.label_width_in(names))
    left, right = fig.subplots(1, 2, width_ratios=[1.35, 1.0])
    fig.subplots_adjust(wspace=0.08)
    style.tag_axes(left, "layers-loss")
    style.tag_axes(right, "layers-probability")
    y = np.arange(len(layers), dtype=float)
    _losses(left, layers, y)
    _probabilities(right, layers, y)
    fig.legend(loc="lower center", ncol=3, bbox_to_anchor=(0.5, 0.0))
    return fig
