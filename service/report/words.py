"""A request's model in words, for readers who do not read JSON.

Works on the request as a plain dict (the stored batch item), so that fields added to the
contract later (dependence, obligor groups, ...) are described where known and never break
the report where not.
"""

from __future__ import annotations

from typing import Any

from service.report.numbers import amount, number


def count(spec: dict[str, Any]) -> str:
    kind = spec.get("kind")
    if kind == "fixed":
        return f"exactly {number(spec.get('n'))} claims per period"
    if kind == "poisson":
        return f"Poisson number of claims, mean {number(spec.get('mean'))} per period"
    if kind == "negative_binomial":
        return (f"negative binomial number of claims, mean {number(spec.get('mean'))} per "
                f"period, variance {number(spec.get('dispersion'))} times the mean")
    if kind == "binomial":
        return (f"binomial number of claims: {number(spec.get('trials'))} risks, each claiming "
                f"with probability {number(spec.get('probability'))}")
    return f"{kind} claim count"


def severity(spec: dict[str, Any]) -> str:
    family = spec.get("family")
    if family == "lognormal":
        return (f"lognormal claims (log-mean mu {number(spec.get('mu'))}, log-sd sigma "
                f"{number(spec.get('sigma'))})")
    if family == "pareto":
        return (f"Pareto (Lomax) claims, tail index alpha {number(spec.get('alpha'))}, scale "
                f"{amount(spec.get('scale'))}")
    if family == "weibull":
        return (f"Weibull claims, shape {number(spec.get('shape'))}, scale "
                f"{amount(spec.get('scale'))}")
    if family == "gamma":
        return (f"gamma claims, shape {number(spec.get('shape'))}, scale "
                f"{amount(spec.get('scale'))}")
    if family == "exponential":
        return f"exponential claims, mean {amount(spec.get('mean'))}"
    if family == "normal":
        return f"normal claims, mean {amount(spec.get('mean'))}, sd {amount(spec.get('sd'))}"
    if family == "generalized_pareto":
        return (f"generalized Pareto claims, shape xi {number(spec.get('xi'))}, scale "
                f"{amount(spec.get('scale'))}")
    return f"{family} claims"


def claim_layer(line: dict[str, Any]) -> str | None:
    retention, limit = line.get("retention"), line.get("limit")
    if retention is None and limit is None:
        return None
    width = "unlimited" if limit is None else amount(limit)
    return f"each claim pays the layer {width} xs {amount(retention or 0)}"


def line(spec: dict[str, Any], position: int) -> str:
    label = spec.get("label") or f"line {position + 1}"
    if "obligors" in spec:
        groups = spec["obligors"]
        groups = groups if isinstance(groups, list) else [groups]
        total = sum(int(g.get("count", 0)) for g in groups if isinstance(g, dict))
        return f"{label}: {total:,} obligors in {len(groups)} group(s) (default losses)"
    parts = [count(spec.get("count") or {}), severity(spec.get("severity") or {})]
    layer = claim_layer(spec)
    if layer:
        parts.append(layer)
    if spec.get("factor_loadings"):
        parts.append(f"factor loadings {', '.join(number(b) for b in spec['factor_loadings'])}")
    return f"{label}: " + "; ".join(parts)


def portfolio(spec: dict[str, Any]) -> list[str]:
    """One sentence per line, then how the lines are coupled."""
    lines = spec.get("lines") or []
    sentences = [line(item, i) for i, item in enumerate(lines) if isinstance(item, dict)]
    dependence, factors = spec.get("dependence"), spec.get("factors")
    if isinstance(dependence, dict) or isinstance(factors, dict):
        copula = (str(dependence.get("copula", "gaussian")).replace("_", "-")
                  if isinstance(dependence, dict) else "gaussian")
        df = (f" with {number(dependence['df'])} degrees of freedom"
              if isinstance(dependence, dict) and dependence.get("df") is not None else "")
        through = (f" through {number(factors.get('count'))} common factors (factor loadings)"
                   if isinstance(factors, dict) else " (correlation matrix)")
        sentences.append(f"The lines are dependent: a {copula} copula{df}{through}.")
    else:
        sentences.append("The lines are independent; S is the sum of their period losses.")
    return sentences


def process(spec: dict[str, Any]) -> list[str]:
    """A surplus process for ruin, in words."""
    label = spec.get("label") or "the book"
    premium = (f"premium with safety loading {number(spec['loading'])}"
               if spec.get("loading") is not None
               else f"premium rate {amount(spec.get('premium_rate'))} per unit of time")
    out = [f"{label}: claims arrive at rate {number(spec.get('claim_rate'))} per unit of time; "
           f"{severity(spec.get('severity') or {})}; {premium}."]
    if spec.get("retention") is not None:
        out.append(f"An excess-of-loss cover caps each claim the insurer pays at "
                   f"{amount(spec['retention'])}.")
    return out


def asked(kind: str, request: dict[str, Any]) -> str:
    """What the item asked for, in a sentence."""
    method = request.get("method", "auto")
    precision = request.get("precision") or {}
    budget = ", ".join(f"{k.replace('_', ' ')} {number(v)}" for k, v in precision.items()
                       if v is not None) or "server defaults"
    if kind == "exceedance":
        what = "P(S > x) at " + ", ".join(amount(x) for x in request.get("thresholds", []))
    elif kind == "risk_measures":
        parts = []
        if request.get("levels"):
            parts.append("VaR and TVaR at " + ", ".join(f"{100 * q:g}%" for q in
                                                        request["levels"]))
        if request.get("return_periods"):
            parts.append("losses at return periods " + ", ".join(
                f"{t:g}" for t in request["return_periods"]))
        if request.get("losses"):
            parts.append("return periods of losses " + ", ".join(
                amount(x) for x in request["losses"]))
        what = "; ".join(parts)
    elif kind == "layers":
        what = "aggregate layers " + ", ".join(
            f"{'unlimited' if ly.get('limit') is None else amount(ly['limit'])} xs "
            f"{amount(ly.get('attachment'))}" for ly in request.get("layers", []))
    else:
        horizon = ("ever" if request.get("horizon") is None
                   else f"by time {number(request['horizon'])}")
        what = "ruin probability " + horizon + " at capitals " + ", ".join(
            amount(u) for u in request.get("capital", []))
        if request.get("target_probability") is not None:
            what += f"; capital for a target of {number(request['target_probability'])}"
    return f"Asked for {what}; method {method}; precision: {budget}."
