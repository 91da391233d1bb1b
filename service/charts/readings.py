"""Every headline figure of a response as one flat reading: its name, value, relative error
and reliability flag. The reliability strip draws them; the run report tabulates them.

The relative error is std_error / estimate where the response carries a standard error. A
value-at-risk has none (its interval comes from the order statistics), so its relative error
is the interval's half-width over 1.96 VaR, the same quantity under a normal interval, and
the reading says so in ``basis``. Deterministic figures (method recursion) have none.
"""

from __future__ import annotations

from dataclasses import dataclass

from pydantic import BaseModel

from service.charts.formats import money, percent
from service.schemas.common import DiagnosticsOut
from service.schemas.exceedance import ExceedanceResponse
from service.schemas.layers import LayersResponse
from service.schemas.risk_measures import RiskMeasuresResponse
from service.schemas.ruin import RuinResponse

Z95 = 1.959963984540054  # two-sided 95% normal quantile, scipy.stats.norm.ppf(0.975)


@dataclass(frozen=True, kw_only=True)
class Reading:
    label: str  # e.g. "P(S > 25M)", "TVaR 99.5%"
    value: float | None
    relative_error: float | None
    basis: str  # "std_error" | "interval" | "bounds" | "none"
    reliable: bool
    reason: str


def _ratio(num: float | None, den: float | None) -> float | None:
    if num is None or den is None or den == 0:
        return None
    return abs(num / den)


def _half_width(value: float | None, low: float | None, high: float | None) -> float | None:
    if value is None or low is None or high is None or value == 0:
        return None
    return abs((high - low) / 2 / (Z95 * value))


def _reading(label: str, value: float | None, rel: float | None, basis: str,
             d: DiagnosticsOut) -> Reading:
    return Reading(label=label, value=value, relative_error=rel,
                   basis=basis if rel is not None else "none",
                   reliable=d.reliable, reason=d.reason)


def _basis(method: str) -> str:
    # With recursion the response's relative_error is the bounds' half-width / estimate.
    return "bounds" if method == "recursion" else "std_error"


def _exceedance(r: ExceedanceResponse) -> list[Reading]:
    return [_reading(f"P(S > {money(e.threshold)})", e.probability, e.relative_error,
                     _basis(r.method), e.diagnostics) for e in r.estimates]


def _measures(r: RiskMeasuresResponse) -> list[Reading]:
    out: list[Reading] = []
    spread = "bounds" if r.method == "recursion" else "interval"
    for m in r.measures:
        q = percent(m.level)
        out.append(_reading(f"VaR {q}", m.var, _half_width(m.var, m.var_ci_low, m.var_ci_high),
                            spread, m.diagnostics))
        out.append(_reading(f"TVaR {q}", m.tvar, _ratio(m.tvar_std_error, m.tvar),
                            "std_error", m.diagnostics))
    for c in r.curve:
        out.append(_reading(f"loss 1 in {c.return_period:g}", c.loss,
                            _half_width(c.loss, c.loss_ci_low, c.loss_ci_high), spread,
                            c.diagnostics))
    return out


def _layers(r: LayersResponse) -> list[Reading]:
    out: list[Reading] = []
    for ly in r.layers:
        width = "unlimited" if ly.limit is None else money(ly.limit)
        out.append(_reading(f"E[layer {width} xs {money(ly.attachment)}]", ly.expected_loss,
                            _ratio(ly.expected_loss_std_error, ly.expected_loss), "std_error",
                            ly.diagnostics))
    return out


def _ruin(r: RuinResponse) -> list[Reading]:
    return [_reading(f"psi({money(e.capital)})", e.probability, e.relative_error,
                     _basis(r.method), e.diagnostics) for e in r.estimates]


def readings(response: BaseModel) -> list[Reading]:
    """The headline figures of any computed response, in response order."""
    if isinstance(response, ExceedanceResponse):
        return _exceedance(response)
    if isinstance(response, RiskMeasuresResponse):
        return _measures(response)
    if isinstance(response, LayersResponse):
        return _layers(response)
    if isinstance(response, RuinResponse):
        return _ruin(response)
    raise TypeError(f"no readings for {type(response).__name__}")
