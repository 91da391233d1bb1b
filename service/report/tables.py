"""The figures of each response kind as HTML tables. Rows whose diagnostics say the error bar
cannot be trusted get the class ``unreliable`` and say why in their last cell."""

from __future__ import annotations

from dataclasses import dataclass
from html import escape

from pydantic import BaseModel

from service.report.numbers import MISSING, amount, interval, percent, probability, years
from service.schemas.common import DiagnosticsOut
from service.schemas.exceedance import ExceedanceResponse
from service.schemas.layers import LayersResponse
from service.schemas.risk_measures import RiskMeasuresResponse
from service.schemas.ruin import RuinResponse


@dataclass(frozen=True)
class Table:
    caption: str
    headers: list[str]
    rows: list[list[str]]  # plain text cells, escaped when written
    unreliable: list[bool]


def _flag(d: DiagnosticsOut | None) -> str:
    if d is None:
        return MISSING
    return "yes" if d.reliable else f"NO: {d.reason}"


def _bad(d: DiagnosticsOut | None) -> bool:
    return d is not None and not d.reliable


def _band(method: str) -> str:
    return "bounds" if method == "recursion" else "95% interval"


def exceedance(r: ExceedanceResponse) -> list[Table]:
    rows = [[amount(e.threshold), probability(e.probability), interval(e.ci_low, e.ci_high),
             years(e.probability), probability(e.relative_error), f"{e.samples:,}",
             _flag(e.diagnostics)] for e in r.estimates]
    return [Table("Exceedance probabilities",
                  ["threshold x", "P(S > x)", _band(r.method), "return period",
                   "relative error", "samples", "reliable"], rows,
                  [_bad(e.diagnostics) for e in r.estimates])]


def _money_interval(low: float | None, high: float | None) -> str:
    return interval(low, high, amount)


def risk_measures(r: RiskMeasuresResponse) -> list[Table]:
    band = _band(r.method)
    tables: list[Table] = []
    if r.measures:
        tables.append(Table(
            "Value-at-risk and tail value-at-risk",
            ["level q", "VaR", f"VaR {band}", "TVaR", f"TVaR {band}", "reliable"],
            [[percent(m.level), amount(m.var), _money_interval(m.var_ci_low, m.var_ci_high),
              amount(m.tvar), _money_interval(m.tvar_ci_low, m.tvar_ci_high),
              _flag(m.diagnostics)] for m in r.measures],
            [_bad(m.diagnostics) for m in r.measures]))
    if r.curve:
        tables.append(Table(
            "Losses by return period", ["return period", "loss", band, "reliable"],
            [[f"1 in {c.return_period:g}", amount(c.loss),
              _money_interval(c.loss_ci_low, c.loss_ci_high), _flag(c.diagnostics)]
             for c in r.curve],
            [_bad(c.diagnostics) for c in r.curve]))
    if r.loss_return_periods:
        tables.append(Table(
            "Return periods of losses", ["loss x", "P(S > x)", band, "return period"],
            [[amount(x.loss), probability(x.probability),
              interval(x.probability_ci_low, x.probability_ci_high), years(x.probability)]
             for x in r.loss_return_periods],
            [False for _ in r.loss_return_periods]))
    for m in r.measures:
        parts = list(m.contributions)
        if parts:
            tables.append(Table(
                f"Contributions to TVaR {percent(m.level)} (Euler allocation)",
                ["group", "contribution", "95% interval", "share of TVaR"],
                [[c.label or f"line {i + 1}", amount(c.tvar_contribution),
                  _money_interval(c.ci_low, c.ci_high),
                  percent(None if not m.tvar or c.tvar_contribution is None
                          else c.tvar_contribution / m.tvar)]
                 for i, c in enumerate(parts)],
                [False for _ in parts]))
    return tables


def layers(r: LayersResponse) -> list[Table]:
    band = _band(r.method)
    rows = [[f"{'unlimited' if ly.limit is None else amount(ly.limit)} xs "
             f"{amount(ly.attachment)}", amount(ly.expected_loss),
             _money_interval(ly.expected_loss_ci_low, ly.expected_loss_ci_high),
             probability(ly.probability_attach),
             interval(ly.probability_attach_ci_low, ly.probability_attach_ci_high),
             probability(ly.probability_exhaust),
             interval(ly.probability_exhaust_ci_low, ly.probability_exhaust_ci_high),
             _flag(ly.diagnostics)] for ly in r.layers]
    return [Table("Aggregate layers",
                  ["layer", "expected loss", band, "P(hit)", band, "P(used up)", band,
                   "reliable"], rows, [_bad(ly.diagnostics) for ly in r.layers])]


def ruin(r: RuinResponse) -> list[Table]:
    band = _band(r.method)
    tables = [Table(
        "Ruin probabilities",
        ["capital u", "psi(u)", band, "relative error", "approximation", "paths", "reliable"],
        [[amount(e.capital), probability(e.probability), interval(e.ci_low, e.ci_high),
          probability(e.relative_error), probability(e.approximation), f"{e.samples:,}",
          _flag(e.diagnostics)] for e in r.estimates],
        [_bad(e.diagnostics) for e in r.estimates])]
    target = r.capital_for_target
    if target is not None:
        tables.append(Table(
            "Capital for the target ruin probability", ["target", "capital", band],
            [[probability(target.target), amount(target.capital),
              _money_interval(target.ci_low, target.ci_high)]], [False]))
    return tables


def tables_for(response: BaseModel) -> list[Table]:
    if isinstance(response, ExceedanceResponse):
        return exceedance(response)
    if isinstance(response, RiskMeasuresResponse):
        return risk_measures(response)
    if isinstance(response, LayersResponse):
        return layers(response)
    if isinstance(response, RuinResponse):
        return ruin(response)
    raise TypeError(f"no tables for {type(response).__name__}")


def to_html(table: Table) -> str:
    head = "".join(f"<th scope='col'>{escape(h)}</th>" for h in table.headers)
    body = []
    for cells, bad in zip(table.rows, table.unreliable, strict=True):
        attr = " class='unreliable'" if bad else ""
        body.append(f"<tr{attr}>" + "".join(f"<td>{escape(c)}</td>" for c in cells) + "</tr>")
    return (f"<table><caption>{escape(table.caption)}</caption><thead><tr>{head}</tr></thead>"
            f"<tbody>{''.join(body)}</tbody></table>")
