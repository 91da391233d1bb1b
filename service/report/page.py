"""The HTML of the run report (see the package docstring)."""

from __future__ import annotations

import re
from datetime import UTC, datetime
from html import escape
from importlib import resources
from typing import Any

from pydantic import BaseModel, ValidationError

from service import charts
from service.charts.readings import readings
from service.report import tables, words
from service.report.numbers import amount, seconds
from service.resources import KINDS
from service.schemas.runs import (
    RunBatchIn,
    RunItemCancelled,
    RunItemDone,
    RunItemFailed,
    RunItemIn,
    RunOut,
)

CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"
CAUTIONS = (
    "These figures are estimates for the stated model, not advice. Model risk (the choice of "
    "laws and parameters) usually dominates the sampling error: the intervals cover the "
    "sampling error of the stated model only.",
    "Capital and reserving figures follow the local regulator's rules and need a qualified "
    "actuary's sign-off before they are used.",
)
KIND_TITLES = {"exceedance": "Exceedance probabilities", "risk_measures": "Risk measures",
               "layers": "Aggregate layers", "ruin": "Ruin probabilities"}
METHOD_WORDS = {
    "crude": "plain Monte Carlo simulation",
    "tilted": "exponential tilting (importance sampling suited to light tails)",
    "conditional": "Asmussen-Kroese conditional Monte Carlo (suited to heavy tails)",
    "conditional_is": "conditional Monte Carlo over which claim is the largest, with adapted "
                      "importance sampling on the other claims (heavy tails)",
    "recursion": "deterministic discretised recursion: the intervals are rigorous lower and "
                 "upper bounds, not confidence intervals",
    "exact": "no simulation needed (the answer is known exactly)",
}
_ID = re.compile(r'\bid="([^"]+)"')
_REF = re.compile(r'(href="#|url\(#)([^")]+)')


def _css() -> str:
    return resources.files("service.report").joinpath("style.css").read_text(encoding="utf-8")


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "-", text).strip("-") or "item"


def scoped_svg(svg: str, prefix: str) -> str:
    """Give every id in an inline SVG a prefix (and every reference to one), so that several
    charts in one page never share an id."""
    svg = _ID.sub(lambda m: f'id="{prefix}-{m.group(1)}"', svg)
    return _REF.sub(lambda m: f"{m.group(1)}{prefix}-{m.group(2)}", svg)


def _header(run: RunOut, generated_at: str) -> str:
    p = run.progress
    rows = [("run id", run.run_id), ("status", run.status), ("submitted", run.created_at),
            ("last change", run.updated_at), ("engine version", run.engine_version),
            ("items", f"{p.total} ({p.done - p.failed} computed, {p.failed} failed, "
                      f"{p.cancelled} cancelled, {p.queued + p.running} not finished)"),
            ("report generated", generated_at)]
    meta = "".join(f"<dt>{escape(k)}</dt><dd>{escape(v)}</dd>" for k, v in rows)
    cautions = "".join(f"<p>{escape(c)}</p>" for c in CAUTIONS)
    return (f"<header><h1>Run report: {escape(run.name)}</h1><dl class='meta'>{meta}</dl>"
            f"<section class='cautions' aria-label='cautions'><p><strong>Cautions.</strong>"
            f"</p>{cautions}</section></header>")


def _contents(run: RunOut, batch: RunBatchIn) -> str:
    by_id = {r.id: r for r in run.results}
    rows = []
    for item in batch.items:
        result = by_id.get(item.id)
        status = result.status if result is not None else "not finished"
        method = (str(result.result.get("method", "")) if isinstance(result, RunItemDone)
                  else "")
        seed = result.seed if result is not None else _request_seed(item)
        rows.append(f"<tr><td><a href='#item-{escape(_slug(item.id))}'>{escape(item.id)}</a>"
                    f"</td><td>{escape(KIND_TITLES[item.kind])}</td><td>{escape(status)}</td>"
                    f"<td>{escape(method)}</td><td>{escape(_seed(seed))}</td></tr>")
    return ("<nav aria-label='items'><table><caption>Items and their seeds (the seed and "
            "engine version reproduce every figure)</caption><thead><tr><th>item</th>"
            "<th>kind</th><th>status</th><th>method</th><th>seed</th></tr></thead><tbody>"
            + "".join(rows) + "</tbody></table></nav>")


def _seed(seed: Any) -> str:
    # Seeds are identifiers: printed in full, without separators.
    return str(seed) if isinstance(seed, int) and not isinstance(seed, bool) else "\u2013"


def _request_seed(item: RunItemIn) -> Any:
    return item.request.get("seed") if isinstance(item.request, dict) else None


def _model(item: RunItemIn) -> str:
    request = item.request if isinstance(item.request, dict) else {}
    if item.kind == "ruin":
        sentences = words.process(request.get("process") or {})
    else:
        sentences = words.portfolio(request.get("portfolio") or {})
    listed = "".join(f"<li>{escape(s)}</li>" for s in sentences)
    return (f"<h3>Model</h3><ul class='model'>{listed}</ul>"
            f"<p>{escape(words.asked(item.kind, request))}</p>")


def _method(response: BaseModel, result: RunItemDone) -> str:
    data = response.model_dump()
    method = str(data.get("method", ""))
    lines = [
        f"<p><strong>Method:</strong> {escape(method)}: "
        f"{escape(METHOD_WORDS.get(method, method))}.</p>",
        f"<p><strong>Why:</strong> {escape(str(data.get('method_reason', '')))}</p>",
        f"<p>Stopped by {escape(str(data.get('stopped_by', '')))}; seed "
        f"{escape(_seed(data.get('seed')))}; engine {escape(result.engine_version)}; "
        f"engine time {escape(seconds(data.get('elapsed_s')))}"
        + (f"; {data['samples']:,} samples" if isinstance(data.get("samples"), int) else "")
        + ".</p>",
    ]
    if "mean" in data:
        # Null means infinite here (e.g. a Pareto line with alpha <= 2 has no variance).
        mean, sd = (amount(v) if v is not None else "infinite"
                    for v in (data.get("mean"), data.get("std_dev")))
        lines.append(f"<p>Exact mean of S {escape(mean)}, standard deviation {escape(sd)}.</p>")
    return "<div class='method'>" + "".join(lines) + "</div>"


def _warnings(response: BaseModel) -> str:
    notes = list(getattr(response, "warnings", []))
    shaky = [r.label for r in readings(response) if not r.reliable]
    if shaky and not any("unreliable" in n for n in notes):
        notes.append(f"{len(shaky)} figure(s) flagged unreliable: {', '.join(shaky)} (the "
                     "highlighted rows say why)")
    if not notes:
        return "<p>No warnings; every figure passed its reliability checks.</p>"
    return ("<ul class='warnings' aria-label='warnings'>"
            + "".join(f"<li>{escape(n)}</li>" for n in notes) + "</ul>")


def _charts(response: BaseModel, prefix: str) -> str:
    out = []
    for kind in charts.kinds_for(response):
        svg = charts.render(kind, response, "svg").decode("utf-8")
        out.append(f"<figure class='chart' data-kind='{kind}'>"
                   f"{scoped_svg(svg, f'{prefix}-{kind}')}"
                   f"<figcaption>{escape(charts.CHARTS[kind].caption)}</figcaption></figure>")
    return "".join(out)


def _done(item: RunItemIn, result: RunItemDone, prefix: str) -> str:
    try:
        response = KINDS[item.kind].response.model_validate(result.result)
    except ValidationError:
        return "<p class='warnings'>The stored result could not be read back.</p>"
    return (_method(response, result) + _warnings(response)
            + "".join(tables.to_html(t) for t in tables.tables_for(response))
            + _charts(response, prefix))


def _item(item: RunItemIn, result: RunItemDone | RunItemFailed | RunItemCancelled | None,
          position: int) -> str:
    slug = _slug(item.id)
    status = result.status if result is not None else "not finished"
    head = (f"<section class='item' id='item-{escape(slug)}' data-item-id='{escape(item.id)}'"
            f" data-status='{escape(status)}'><h2>{position}. {escape(item.id)} "
            f"<span class='status {escape(status)}'>{escape(status)}</span></h2>"
            f"<p>{escape(KIND_TITLES[item.kind])}.</p>{_model(item)}")
    if isinstance(result, RunItemDone):
        body = _done(item, result, f"c{position}")
    elif isinstance(result, RunItemFailed):
        body = ("<ul class='warnings'>" + "".join(
            f"<li>{escape('.'.join(str(p) for p in e.loc))}: {escape(e.msg)} ({escape(e.type)})"
            "</li>" for e in result.error) + "</ul>")
    elif isinstance(result, RunItemCancelled):
        body = "<p>Not computed: the run was cancelled before this item started.</p>"
    else:
        body = "<p>Not finished yet: open the report again when the run is done.</p>"
    return head + body + "</section>"


def build_report(run: RunOut, batch: RunBatchIn, *, generated_at: str | None = None) -> str:
    """The whole report page as one HTML string."""
    when = generated_at or datetime.now(UTC).isoformat(timespec="seconds")
    by_id = {r.id: r for r in run.results}
    items = "".join(_item(item, by_id.get(item.id), i + 1)
                    for i, item in enumerate(batch.items))
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<meta http-equiv='Content-Security-Policy' content=\"{CSP}\">"
        "<meta name='viewport' content='width=device-width, initial-scale=1'>"
        "<link rel='icon' href='data:,'>"
        f"<title>{escape(run.name)}: run report</title><style>{_css()}</style></head><body>"
        f"{_header(run, when)}{_contents(run, batch)}<main>{items}</main>"
        f"<footer>tailgauge run report, engine {escape(run.engine_version)}; run "
        f"{escape(run.run_id)}. {escape(CAUTIONS[0])}</footer></body></html>"
    )
