"""The steps every portfolio computation shares: limits, translation, seed, engine call."""

from __future__ import annotations

import secrets
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import core
from core.credit import CreditModel
from core.errors import LimitError, TailgaugeError
from service import limits, translate
from service.executor import ComputePool
from service.schemas.common import PortfolioRequest
from service.settings import Settings

SEED_BITS = 53  # JSON-safe: JavaScript numbers hold integers exactly up to 2**53 - 1


def draw_seed() -> int:
    return secrets.randbits(SEED_BITS)


@dataclass(frozen=True)
class Prepared:
    portfolio: core.Portfolio | CreditModel
    budget: limits.Budget
    seed: int


def prepare(request: PortfolioRequest, settings: Settings) -> Prepared:
    """Check the server limits and build the core objects of a portfolio request."""
    limits.check_portfolio_size(request.portfolio, settings)
    portfolio = translate.portfolio(request.portfolio)
    if isinstance(portfolio, core.Portfolio):
        limits.check_expected_claims(portfolio, settings)
    budget = limits.budget(request.precision, settings)
    seed = request.seed if request.seed is not None else draw_seed()
    return Prepared(portfolio=portfolio, budget=budget, seed=seed)


async def run_engine(
    pool: ComputePool, fn: Callable[..., Any], *args: Any, wall_limit_s: float, **kwargs: Any
) -> Any:
    """Run an engine function in the pool, pointing its errors at request fields."""
    try:
        return await pool.run(fn, *args, wall_limit_s=wall_limit_s, **kwargs)
    except TailgaugeError as exc:
        raise translate.engine_error_path(exc) from exc
    except (ArithmeticError, ValueError, MemoryError) as exc:
        # A model at the edge of double precision (or of memory) that the core's own checks
        # did not catch: the request, not the server, is at fault, so 422 and not 500.
        raise LimitError(
            "portfolio",
            f"the model is outside what the engine can compute in double precision "
            f"({type(exc).__name__}: {exc}); rescale the amounts or narrow the parameters",
        ) from exc
