"""Checks every result must pass before it leaves the core, whatever estimator made it.

A probability outside [0, 1], an interval with its low end above its high end, an estimate
outside its own interval, a layer loss outside [0, limit] or a VaR that falls as the level
rises is never sent as a trustworthy figure: the estimate keeps its value (clipped into the
range a probability or a layer loss can take, so that a client never reads 1.39 as a
probability) and is marked unreliable, and a warning says what was violated. These are facts of
the quantities (common practice), not tuning: a healthy estimator never trips them.

A Monte Carlo figure with a zero-width interval is not exact: with every sampled contribution
equal the spread is simply unobserved. Its interval is widened by the no-hit rule (a probability
of 1 from n samples gets [0.05^(1/n), 1], the rule of three mirrored; valid for contributions
bounded by 1), and any figure other than 1 is also flagged. Only figures the engine knows in
closed form carry `exact = True` in their diagnostics.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from collections.abc import Sequence
from typing import Any, TypeVar

from core import intervals
from core.results import Diagnostics, Estimate

E = TypeVar("E", bound=Estimate)
# Measure and layer records (core.measures) are read by attribute: importing them here would
# make core.measures and this module import each other.
M = TypeVar("M", bound=Any)
L = TypeVar("L", bound=Any)

# Relative slack for rounding in the interval ends (a few ulps of a double).
_ULPS = 1e-12
# An interval narrower than this share of its estimate is rounding noise, not an error bar:
# the samples showed no spread (every claim past a retention of 1e18 pays the same).
_NO_SPREAD = 1e-10


def flagged(diag: Diagnostics, why: str) -> Diagnostics:
    """The same diagnostics marked unreliable with `why` added to the reason."""
    reason = why if diag.reliable else f"{diag.reason}; {why}"
    return dataclasses.replace(diag, reliable=False, reason=reason, exact=False)


def _ordered(low: float, value: float, high: float) -> bool:
    slack = _ULPS * max(abs(low), abs(value), abs(high), 1e-300)
    return low <= value + slack and value <= high + slack


def _finite(*values: float | None) -> bool:
    return all(v is None or math.isfinite(v) for v in values)


def probability_problems(value: float, low: float, high: float, std_error: float | None
                         ) -> list[str]:
    """What is wrong with a probability estimate and its interval (empty when nothing)."""
    problems = []
    if not _finite(value, low, high, std_error):
        problems.append("a figure is not a finite number")
        return problems
    if not (0.0 <= value <= 1.0):
        problems.append(f"the estimate {value:.6g} is not a probability (outside [0, 1])")
    if low > high:
        problems.append(f"the interval is reversed (low {low:.6g} > high {high:.6g})")
    elif not _ordered(low, value, high):
        problems.append(f"the estimate {value:.6g} lies outside its interval "
                        f"[{low:.6g}, {high:.6g}]")
    if low < 0.0 or high > 1.0 + _ULPS:
        problems.append("the interval leaves [0, 1]")
    return problems


def check_probability(e: E) -> tuple[E, list[str]]:
    """A probability estimate (exceedance or ruin) made safe: violations flagged and clipped,
    a zero-width Monte Carlo interval replaced by a one-sided bound or flagged."""
    label = _label(e)
    problems = probability_problems(e.value, e.ci_low, e.ci_high, e.std_error)
    if problems:
        why = "invariant violated: " + "; ".join(problems)
        out = dataclasses.replace(_clipped_probability(e),
                                  diagnostics=flagged(e.diagnostics, why))
        return out, [f"{label}: {why}; the figure is not to be trusted"]
    spread = e.ci_high - e.ci_low
    if e.diagnostics.exact or e.samples == 0 or spread > _NO_SPREAD * abs(e.value):
        return e, []
    # Monte Carlo with a zero-width interval: the spread was not observed.
    return _unobserved_spread(e, label)


def _unobserved_spread(e: E, label: str) -> tuple[E, list[str]]:
    """Every one of n contributions (each in [0, 1]) equalled c: by the no-hit rule
    (core.intervals) the share that would differ is at most b = 1 - 0.05^(1/n) at 95%, so the
    mean lies in [c - b c, c + b (1 - c)]. For c = 1 (every sample hit) that is the one-sided
    bound [1 - b, 1], the no-hit bound mirrored; any other c is also flagged, since its spread
    was not measured at all."""
    c, n = e.value, e.samples
    low = c - intervals.no_hit_upper(n, largest=c)
    high = min(1.0, c + intervals.no_hit_upper(n, largest=1.0 - c))
    widened = dataclasses.replace(e, ci_low=low, ci_high=high, std_error=None,
                                  relative_error=None)
    if c >= 1.0:
        return widened, [f"{label}: every one of the {n} samples hit; the interval is the "
                         f"one-sided 95% bound [{low:.6g}, 1]"]
    why = (f"every sample gave the same contribution: the error is not measurable; the "
           f"interval [{low:.6g}, {high:.6g}] bounds the share of samples that would differ")
    return (dataclasses.replace(widened, diagnostics=flagged(e.diagnostics, why)),
            [f"{label}: {why}"])


def _clipped_probability(p: Any) -> Any:
    """A probability interval record with value and ends clipped into [0, 1], ordered."""
    value = min(max(p.value, 0.0), 1.0) if math.isfinite(p.value) else 0.0
    low = min(max(p.ci_low, 0.0), value) if math.isfinite(p.ci_low) else 0.0
    high = max(min(p.ci_high, 1.0), value) if math.isfinite(p.ci_high) else 1.0
    return dataclasses.replace(p, value=value, ci_low=low, ci_high=high)


def check_monotone(estimates: Sequence[E], at: Sequence[float]) -> tuple[list[E], list[str]]:
    """P(S > x) cannot rise with x: two estimates whose intervals are disjoint the wrong way
    round are both flagged (noise alone makes point estimates from different sample sets
    cross, never their whole 95% intervals with any regularity)."""
    out = list(estimates)
    notes: list[str] = []
    order = sorted(range(len(out)), key=lambda i: at[i])
    for a, b in itertools.pairwise(order):
        if at[a] < at[b] and out[a].ci_high < out[b].ci_low:
            why = (f"invariant violated: P(S > {at[b]:g}) is above P(S > {at[a]:g}) "
                   "with disjoint intervals")
            for i in (a, b):
                out[i] = dataclasses.replace(out[i], diagnostics=flagged(out[i].diagnostics,
                                                                          why))
            notes.append(why)
    return out, notes


def _label(e: Estimate) -> str:
    for name in ("threshold", "capital"):
        if hasattr(e, name):
            return f"{name} {getattr(e, name):g}"
    return "estimate"


def check_tail(measures: Sequence[M], layers: Sequence[L],
               var_floor: Sequence[float] | None = None) -> tuple[list[M], list[L], list[str]]:
    """VaR/TVaR and layer figures made safe (see the module docstring): VaR intervals ordered
    and VaR non-decreasing in the level, TVaR >= VaR, a layer loss in [0, limit], attachment
    and exhaustion probabilities in [0, 1] with P(attach) >= P(exhaust). var_floor: rigorous
    lower bounds of each level's VaR (core.levels.largest_claim_var); an interval wholly below
    its floor has missed the truth."""
    notes: list[str] = []
    out_m: list[M] = []
    floors = list(var_floor) if var_floor is not None else [0.0] * len(measures)
    for m, floor in zip(measures, floors, strict=True):
        problems = []
        if floor > 0.0 and m.var.ci_high < floor * (1 - _ULPS):
            problems.append(f"the VaR interval lies below {floor:.6g}, which the largest claim "
                            "alone exceeds with probability above 1 - level")
        for name in ("var", "tvar"):
            iv = getattr(m, name)
            if not _finite(iv.value, iv.ci_low, iv.ci_high):
                problems.append(f"{name} is not a finite number")
            elif iv.ci_low > iv.ci_high:
                problems.append(f"the {name} interval is reversed")
            elif not _ordered(iv.ci_low, iv.value, iv.ci_high):
                problems.append(f"{name} lies outside its interval")
        var, tvar = m.var.value, m.tvar.value
        if _finite(var, tvar) and tvar < var - _ULPS * abs(var):
            problems.append("tvar is below var")
        if problems:
            why = "invariant violated: " + "; ".join(problems)
            m = dataclasses.replace(m, diagnostics=flagged(m.diagnostics, why))
            notes.append(f"level {m.level:g}: {why}")
        out_m.append(m)
    ranked = sorted(range(len(out_m)), key=lambda i: out_m[i].level)
    for a, b in itertools.pairwise(ranked):
        lo, hi = out_m[a], out_m[b]
        if lo.level < hi.level and lo.var.ci_low > hi.var.ci_high:
            why = (f"invariant violated: VaR at {lo.level:g} lies above VaR at {hi.level:g} "
                   "with disjoint intervals")
            out_m[a] = dataclasses.replace(lo, diagnostics=flagged(lo.diagnostics, why))
            out_m[b] = dataclasses.replace(hi, diagnostics=flagged(hi.diagnostics, why))
            notes.append(why)
    out_l: list[L] = []
    for ly in layers:
        problems = []
        cap = math.inf if ly.limit is None else float(ly.limit)
        el = ly.expected_loss
        if not _finite(el.value, el.ci_low, el.ci_high if math.isfinite(cap) else None):
            problems.append("the expected loss is not a finite number")
        elif not (0.0 <= el.value <= cap * (1 + _ULPS)):
            problems.append(f"the expected loss {el.value:.6g} is outside [0, limit]")
        elif el.ci_low > el.ci_high or not _ordered(el.ci_low, el.value, el.ci_high):
            problems.append("the expected loss interval is not ordered around the estimate")
        for name in ("probability_attach", "probability_exhaust"):
            p = getattr(ly, name)
            if p is not None:
                problems += [f"{name}: {t}" for t in
                             probability_problems(p.value, p.ci_low, p.ci_high, p.std_error)]
        pe = ly.probability_exhaust
        if pe is not None and pe.value > ly.probability_attach.value * (1 + _ULPS) + 1e-300:
            problems.append("the exhaustion probability exceeds the attachment probability")
        if problems:
            why = "invariant violated: " + "; ".join(problems)
            value = min(max(el.value, 0.0), cap) if math.isfinite(el.value) else 0.0
            fixed = dataclasses.replace(el, value=value, ci_low=min(max(el.ci_low, 0.0), value),
                                        ci_high=max(min(el.ci_high, cap), value))
            probs = {name: _clipped_probability(getattr(ly, name))
                     for name in ("probability_attach", "probability_exhaust")
                     if getattr(ly, name) is not None}
            ly = dataclasses.replace(ly, expected_loss=fixed, **probs,
                                     diagnostics=flagged(ly.diagnostics, why))
            notes.append(f"layer {ly.attachment:g} xs: {why}")
        out_l.append(ly)
    return out_m, out_l, notes
