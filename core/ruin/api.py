"""ruin(): ruin probabilities of a surplus process at a list of capitals, and the capital for a
target ruin probability.

Which estimator:

- infinite horizon, light tails (an adjustment coefficient exists): Siegmund's algorithm
  (`tilted`); `crude`, `conditional`, `conditional_is` estimate the Pollaczek-Khinchine
  geometric sum with the exceedance engine's method of that name;
- infinite horizon, heavy tails: Pollaczek-Khinchine on the exceedance engine (`auto` lets the
  engine choose);
- finite horizon: `tilted` (light tails; Siegmund's measure stopped at the horizon, steeper
  tilts for capitals beyond it), `conditional` (heavy tails; conditional Monte Carlo on the
  largest claim of the path), `crude` (plain simulation to the horizon);
- `recursion` (infinite horizon only): deterministic lower and upper bounds of the
  Pollaczek-Khinchine sum (core.ruin.recursion).

With the net profit condition failing the infinite-horizon answer is exactly 1 for every
capital: it is returned with a warning, without simulation.
"""

from __future__ import annotations

import math
import numbers
import time
from collections.abc import Callable, Sequence

import numpy as np

from core.errors import MethodError, ParameterError
from core.estimators import registry
from core.estimators.estimator import RuinRegime
from core.estimators.registry import AUTO
from core.exceedance import check_seed
from core.invariants import check_probability
from core.precision import Precision
from core.results import CapitalForTarget, Diagnostics, RuinEstimate, RuinResult
from core.ruin import capital, report
from core.ruin.big_jump import JumpRegime
from core.ruin.geometric import GeometricRegime
from core.ruin.lundberg import adjustment_coefficient, lundberg_constant
from core.ruin.process import SurplusProcess
from core.ruin.recursion import ruin_bounds
from core.ruin.runner import Batch, Context
from core.ruin.siegmund import PathRegime
from core.severities import Capped
from core.validate import finite_numbers

# auto and every estimator that names a ruin regime (core.estimators.registry).
RUIN_METHODS = registry.ruin_methods()

Regime = PathRegime | GeometricRegime | JumpRegime


def _capitals(values: Sequence[float]) -> np.ndarray:
    return finite_numbers("capital", values, minimum=0.0)


def _horizon(horizon: float | None) -> float:
    if horizon is None:
        return math.inf
    if isinstance(horizon, bool) or not isinstance(horizon, numbers.Real):
        raise ParameterError("horizon", f"must be a number, got {horizon!r}")
    if not (math.isfinite(horizon) and horizon > 0):
        raise ParameterError("horizon", f"must be finite and > 0, got {horizon!r}")
    return float(horizon)


def _target(target: float | None) -> float | None:
    if target is None:
        return None
    if isinstance(target, bool) or not isinstance(target, numbers.Real) or not 0 < target < 1:
        raise ParameterError("target_probability", f"must be in (0, 1), got {target!r}")
    return float(target)


def _siegmund(ctx: Context, method: str) -> Regime:
    if ctx.gamma is None:
        raise MethodError(
            "method",
            f"{method} (Siegmund's algorithm) needs light-tailed claims with an adjustment "
            "coefficient; use auto or conditional, or give a retention",
        )
    return PathRegime(ctx, tilted=True)


def _tilted_paths(ctx: Context, method: str) -> Regime:
    if ctx.process.net_severity.tail != "light":
        raise MethodError(
            "method",
            f"{method} needs light-tailed claims; use conditional or auto, or give a retention",
        )
    return PathRegime(ctx, tilted=True)


def _big_jump(ctx: Context, method: str) -> Regime:  # noqa: ARG001 - the REGIMES signature
    if isinstance(ctx.process.net_severity, Capped):
        raise MethodError(
            "method",
            "conditional needs claims without an atom; a claim capped by a retention has one at "
            "the retention: use tilted or auto",
        )
    return JumpRegime(ctx)


# How each ruin regime an estimator names (Estimator.ruin_infinite / ruin_finite) is built.
REGIMES: dict[RuinRegime, Callable[[Context, str], Regime]] = {
    RuinRegime.SIEGMUND: _siegmund,
    RuinRegime.GEOMETRIC_SUM: GeometricRegime,
    RuinRegime.TILTED_PATHS: _tilted_paths,
    RuinRegime.CRUDE_PATHS: lambda ctx, _method: PathRegime(ctx, tilted=False),
    RuinRegime.BIG_JUMP: _big_jump,
}


def _regime_kind(method: str, finite: bool, process: SurplusProcess) -> RuinRegime:
    """The regime of `method`; auto: Siegmund where an adjustment coefficient exists, else the
    Pollaczek-Khinchine sum; with a horizon tilted paths for light tails, else the big jump."""
    if method == AUTO:
        if finite:
            light = process.net_severity.tail == "light"
            return RuinRegime.TILTED_PATHS if light else RuinRegime.BIG_JUMP
        has_gamma = adjustment_coefficient(process) is not None
        return RuinRegime.SIEGMUND if has_gamma else RuinRegime.GEOMETRIC_SUM
    est = registry.get(method)
    kind = est.ruin_finite if finite else est.ruin_infinite
    if kind is None:
        raise MethodError("method", est.ruin_refusal or f"{method} does not estimate ruin")
    return kind


def _checked(estimates: list[RuinEstimate]) -> tuple[list[RuinEstimate], list[str]]:
    """Every estimate through the invariant checks (core.invariants)."""
    out, notes = [], []
    for e in estimates:
        fixed, more = check_probability(e)
        out.append(fixed)
        notes += more
    return out, notes


def _certain(process: SurplusProcess, u: np.ndarray, target: float | None, seed: int,
             start: float) -> RuinResult:
    why = (f"the net profit condition fails (premium rate {process.premium:g} <= claim rate x "
           f"mean claim {process.claim_rate * process.mean_claim:g}): ruin is certain for "
           "every capital")
    diag = Diagnostics.deterministic(f"exact: {why}", exact=True)
    estimates = [
        RuinEstimate(capital=float(v), value=1.0, std_error=0.0, relative_error=0.0, ci_low=1.0,
                     ci_high=1.0, samples=0, hits=0, diagnostics=diag, method="exact",
                     approximation=1.0)
        for v in u
    ]
    warnings = [why]
    wanted = None
    if target is not None:
        wanted = CapitalForTarget(target=target, capital=None, ci_low=None, ci_high=None)
        warnings.append(f"capital for target {target:g}: no capital achieves it")
    return RuinResult(
        method="exact", method_reason=why, seed=seed, elapsed_s=time.monotonic() - start,
        stopped_by="exact", premium_rate=process.premium, horizon=None,
        adjustment_coefficient=None, lundberg_constant=None, estimates=estimates,
        capital_for_target=wanted, warnings=warnings,
    )


def _for_target(regime: Regime, ctx: Context, target: float
                ) -> tuple[CapitalForTarget, list[str], list[str]]:
    if not math.isfinite(ctx.horizon) and target >= ctx.process.rho:
        # psi(0) = rho exactly and psi decreases: no capital is needed
        return CapitalForTarget(target=target, capital=0.0, ci_low=0.0, ci_high=0.0), [], []
    bracket = regime.bracket(target)
    if bracket is None:
        process = ctx.process
        top = 10.0 * process.mean_claim + process.claim_rate * process.mean_claim * ctx.horizon
        bracket = capital.Bracket(lo=0.0, hi=top, log_u=False, sure_hi=False)
    estimate: capital.Estimator
    if isinstance(regime, PathRegime):
        def estimate(u: np.ndarray, stream: int) -> Batch:
            return regime.estimate(u, stream, tilt_at=bracket.hi)
    else:
        estimate = regime.estimate
    return capital.search(estimate, bracket, target, deadline=ctx.deadline)


def ruin(
    process: SurplusProcess,
    capitals: Sequence[float],
    *,
    horizon: float | None = None,
    target_probability: float | None = None,
    method: str = "auto",
    precision: Precision | None = None,
    seed: int | None = None,
) -> RuinResult:
    """Ruin probabilities psi(u) (or psi(u, T) with a horizon) at every capital, with intervals,
    diagnostics and the classical approximation; with target_probability also the smallest
    capital whose ruin probability is at most the target."""
    start = time.monotonic()
    if not isinstance(process, SurplusProcess):
        raise ParameterError("process", f"must be a SurplusProcess, got {type(process).__name__}")
    u = _capitals(capitals)
    horizon_t = _horizon(horizon)
    target = _target(target_probability)
    if method not in RUIN_METHODS:
        raise ParameterError("method", f"must be one of {', '.join(RUIN_METHODS)}; got {method!r}")
    seed = check_seed(seed)
    if not math.isfinite(horizon_t) and not process.profitable:
        return _certain(process, u, target, seed, start)
    kind = _regime_kind(method, math.isfinite(horizon_t), process)
    if kind is RuinRegime.BOUNDS:  # deterministic bounds (core.ruin.recursion)
        return ruin_bounds(process, u, horizon=horizon_t, target=target, precision=precision,
                           seed=seed, start=start)
    precision = precision or Precision()
    deadline = precision.deadline(start)
    gamma = adjustment_coefficient(process)
    constant = lundberg_constant(process, gamma) if gamma is not None else None
    ctx = Context(process, horizon_t, precision, seed, deadline, gamma, constant)
    regime = REGIMES[kind](ctx, method)
    estimates, stops = regime.estimate(u, 0)
    estimates, warnings = _checked(estimates)
    warnings += report.warnings_for(estimates)
    wanted = None
    if target is not None:
        wanted, more, notes = _for_target(regime, ctx, target)
        stops, warnings = stops + more, warnings + notes
    stopped = report.worst_stop(stops)
    if stopped == "time_limit":
        warnings.append("stopped by the time limit: the figures are not reproducible exactly")
    chosen = "automatic choice" if method == "auto" else f"{method} requested"
    return RuinResult(
        method=regime.name, method_reason=f"{chosen}: {regime.reason}", seed=seed,
        elapsed_s=time.monotonic() - start, stopped_by=stopped, premium_rate=process.premium,
        horizon=horizon_t if math.isfinite(horizon_t) else None, adjustment_coefficient=gamma,
        lundberg_constant=constant, estimates=estimates,
        capital_for_target=wanted, warnings=warnings,
    )
