"""Server-side compute limits (from Settings) applied to a request before it reaches the pool.

A request over a limit is refused with a 422 that names the limit, except the samples and
time budgets of a request that asks to be "as precise as possible" (precision.relative_error
given, max_samples absent): those are capped at the server's limits, with a warning when the
cap is what stopped the run.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from core import Portfolio, Precision
from core.errors import LimitError, Loc
from service.schemas.common import PortfolioSpec, PrecisionSpec
from service.schemas.credit import CreditLineSpec
from service.settings import Settings


@dataclass(frozen=True)
class Budget:
    """What the engine is given, and which parts of it the server chose."""

    precision: Precision
    wall_limit_s: float  # the server stops waiting after this long, whatever the engine does
    server_max_samples: bool
    server_time_limit: bool
    warnings: list[str] = field(default_factory=list)

    def stop_warnings(self, stopped_by: str, relative_error: float | None) -> list[str]:
        """Say so when a budget the server imposed, not the caller's, ended the run."""
        target = (
            "" if relative_error is None
            else f" before every estimate reached relative_error {relative_error:g}"
        )
        if stopped_by == "max_samples" and self.server_max_samples:
            cap = self.precision.max_samples
            return [f"stopped at the server's cap of {cap} samples per sample set{target}"]
        if stopped_by == "time_limit" and self.server_time_limit:
            limit = self.precision.time_limit_s or 0.0
            return [f"stopped at the server's time limit of {limit:g} s{target}"]
        return []


def check_list_length(loc: Loc, length: int, limit: int, setting: str) -> None:
    if length > limit:
        raise LimitError(
            loc, f"holds {length} items; at most {limit} are allowed (server limit {setting})"
        )


def check_portfolio_size(spec: PortfolioSpec, settings: Settings) -> None:
    check_list_length(("portfolio", "lines"), len(spec.lines), settings.max_lines, "max_lines")
    groups = [g for line in spec.lines if isinstance(line, CreditLineSpec)
              for g in line.obligors]
    check_list_length(("portfolio", "lines"), len(groups), settings.max_obligor_groups,
                      "max_obligor_groups")
    obligors = sum(g.count for g in groups)
    if obligors > settings.max_obligors:
        raise LimitError(("portfolio", "lines"), f"holds {obligors:,} obligors; at most "
                         f"{settings.max_obligors:,} are allowed (server limit max_obligors)")


def check_expected_claims(portfolio: Portfolio, settings: Settings) -> None:
    # Each sample draws about this many claims: it is the cost of one simulated period.
    claims = portfolio.expected_claims
    if claims > settings.max_expected_claims:
        raise LimitError(
            "portfolio",
            f"expects {claims:.6g} paid claims per period; at most "
            f"{settings.max_expected_claims:g} are allowed (server limit max_expected_claims)",
        )


def _check_samples(name: str, value: int | None, settings: Settings) -> None:
    if value is not None and value > settings.max_samples:
        raise LimitError(
            ("precision", name),
            f"must be at most {settings.max_samples} (server limit max_samples)",
        )


def _time_limit(spec: PrecisionSpec, settings: Settings) -> tuple[float, bool, list[str]]:
    """(time limit for the engine, whether the server chose it, warnings)."""
    asked = spec.time_limit_s
    if asked is None:
        return settings.time_limit_s, True, []
    if asked <= settings.time_limit_s:
        return asked, False, []
    if spec.as_precise_as_possible:
        note = f"precision.time_limit_s capped at the server limit of {settings.time_limit_s:g} s"
        return settings.time_limit_s, True, [note]
    raise LimitError(
        ("precision", "time_limit_s"),
        f"must be at most {settings.time_limit_s:g} s (server limit time_limit_s)",
    )


def budget(spec: PrecisionSpec, settings: Settings) -> Budget:
    _check_samples("samples", spec.samples, settings)
    _check_samples("max_samples", spec.max_samples, settings)
    time_limit, server_time, warnings = _time_limit(spec, settings)
    server_samples = spec.as_precise_as_possible
    max_samples = settings.max_samples if server_samples else spec.max_samples
    precision = Precision(
        relative_error=spec.relative_error,
        samples=spec.samples,
        max_samples=max_samples,
        time_limit_s=time_limit,
    )
    # The engine's default first batch (used when samples is absent) must fit the budget too.
    ceiling = min(settings.max_samples, max_samples or settings.max_samples)
    if spec.samples is None and precision.minimum > ceiling:
        precision = replace(precision, samples=ceiling)
    return Budget(
        precision=precision,
        wall_limit_s=time_limit + settings.time_limit_grace_s,
        server_max_samples=server_samples,
        server_time_limit=server_time,
        warnings=warnings,
    )
