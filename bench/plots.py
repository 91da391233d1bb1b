"""PNG plots of the panel's results (bench.panel), drawn with matplotlib's Agg backend (no
display needed). Each function takes the JSON-ready results and writes one file.

    python -m bench.plots [FOLDER]    # redraw the plots from FOLDER/panel.json (bench/out)
"""

from __future__ import annotations

import io
import json
import math
import sys
from pathlib import Path
from typing import Any

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
from matplotlib.ticker import NullFormatter
from PIL import Image

STYLE = {"crude": "C0", "conditional": "C1", "conditional_is": "C2", "tilted": "C3",
         "auto": "k"}
DPI = 80
COLOURS = 64  # line plots need few colours: a palette PNG is a fraction of the size


def _save(fig: Any, path: Path) -> Path:
    for ax in fig.axes:
        ax.xaxis.set_minor_formatter(NullFormatter())  # decade labels only on log axes
        ax.yaxis.set_minor_formatter(NullFormatter())
    fig.tight_layout()
    buffer = io.BytesIO()
    fig.savefig(buffer, dpi=DPI, format="png")
    plt.close(fig)
    buffer.seek(0)
    with Image.open(buffer) as image:
        image.convert("RGB").quantize(colors=COLOURS).save(path, optimize=True)
    return path


def tail_plot(sweeps: list[dict[str, Any]], path: Path) -> Path:
    """Relative error against the exact P (log-log), one panel per case; the dashed line is
    crude's relative error sqrt((1 - p) / (n p)) at the same sample count."""
    cols = 3
    nrows = math.ceil(len(sweeps) / cols)
    fig, axes = plt.subplots(nrows, cols, figsize=(4.0 * cols, 3.0 * nrows), squeeze=False)
    for ax, sweep in zip(axes.flat, sweeps, strict=False):
        p = sweep["exact"]
        n = sweep["samples"]
        ok = [v for v in p if v and v > 0]
        ax.plot(ok, [math.sqrt((1 - v) / (n * v)) for v in ok], "--", color="0.6",
                label="crude, theory")
        for method, s in sweep["series"].items():
            pts = [(pv, re, rel) for pv, re, rel in zip(p, s["relative_error"], s["reliable"],
                                                      strict=True) if pv and re]
            if not pts:
                continue
            label = f"auto ({s['used']})" if method == "auto" else method
            style = ":" if method == "auto" else "-"
            ax.plot([q[0] for q in pts], [q[1] for q in pts], style, marker=".",
                    color=STYLE.get(method, "C4"), label=label)
            bad = [q for q in pts if not q[2]]
            ax.plot([q[0] for q in bad], [q[1] for q in bad], "x", color="r", ms=7)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.invert_xaxis()
        ax.set_title(sweep["label"], fontsize=8)
        ax.set_xlabel("P(S > x)", fontsize=8)
        ax.set_ylabel(f"relative error, {n:g} samples", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.legend(fontsize=6)
    for ax in list(axes.flat)[len(sweeps):]:
        ax.set_visible(False)
    fig.suptitle("Relative error deeper into the tail (red x: flagged unreliable)", fontsize=10)
    return _save(fig, path)


def efficiency_plot(rows: list[dict[str, Any]], path: Path) -> Path:
    """Work-normalised variance of each estimator against crude's exact variance, by case and
    level (log scale; higher is better)."""
    methods = ["conditional", "conditional_is", "tilted", "auto"]
    fig, ax = plt.subplots(figsize=(12.0, 4.0))
    width = 0.2
    labels = []
    for i, row in enumerate(rows):
        labels.append(f"{row['case']}\n{row['level']}")
        for j, m in enumerate(methods):
            v = row["summary"]["vs_exact_crude"].get(m)
            if v and v > 0:
                ax.bar(i + (j - 1.5) * width, v, width, color=STYLE[m],
                       label=m if i == 0 or m not in ax.get_legend_handles_labels()[1] else None)
    ax.set_yscale("log")
    ax.axhline(1.0, color="0.5", lw=0.8)
    ax.set_xticks(range(len(rows)))
    ax.set_xticklabels(labels, rotation=90, fontsize=6)
    ax.set_ylabel("crude WNV / method WNV", fontsize=8)
    ax.set_title("Work-normalised variance against crude (crude's exact variance p(1-p))",
                 fontsize=10)
    ax.legend(fontsize=7)
    return _save(fig, path)


def cost_samples_plot(points: list[dict[str, Any]], path: Path) -> Path:
    cases = sorted({p["case"] for p in points})
    fig, axes = plt.subplots(1, len(cases), figsize=(5.0 * len(cases), 3.5), squeeze=False)
    for ax, case in zip(axes.flat, cases, strict=True):
        for method in STYLE:
            pts = [p for p in points if p["case"] == case and p["method"] == method]
            if pts:
                ax.plot([p["samples"] for p in pts], [p["seconds"] for p in pts], marker="o",
                        color=STYLE[method], label=method)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_title(f"{case}, P near 1e-6", fontsize=9)
        ax.set_xlabel("samples", fontsize=8)
        ax.set_ylabel("seconds (best of repeats)", fontsize=8)
        ax.legend(fontsize=7)
    return _save(fig, path)


def cost_claims_plot(points: list[dict[str, Any]], path: Path) -> Path:
    families = sorted({p["family"] for p in points})
    fig, axes = plt.subplots(1, len(families), figsize=(5.0 * len(families), 3.5),
                             squeeze=False)
    for ax, family in zip(axes.flat, families, strict=True):
        for method in STYLE:
            pts = [p for p in points if p["family"] == family and p["method"] == method]
            if pts:
                ax.plot([p["claims"] for p in pts], [p["seconds"] for p in pts], marker="o",
                        color=STYLE[method], label=method)
        n = points[0]["samples"]
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_title(f"fixed count of {family} claims, P near 1e-6", fontsize=9)
        ax.set_xlabel("claims per sample", fontsize=8)
        ax.set_ylabel(f"seconds for {n:g} samples", fontsize=8)
        ax.legend(fontsize=7)
    return _save(fig, path)


def write_all(results: dict[str, Any], out: Path) -> list[Path]:
    return [
        tail_plot(results["sweeps"], out / "tail.png"),
        efficiency_plot(results["rows"], out / "efficiency.png"),
        cost_samples_plot(results["cost_vs_samples"], out / "cost_samples.png"),
        cost_claims_plot(results["cost_vs_claims"], out / "cost_claims.png"),
    ]


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    out = Path(args[0]) if args else Path(__file__).resolve().parent / "out"
    for path in write_all(json.loads((out / "panel.json").read_text()), out):
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
