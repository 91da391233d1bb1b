"""Dependence between lines: the copula layer and estimators for dependent portfolios.

One idea per module: `copula` (validated correlation, factor, latent draws)."""

from core.dependence.copula import (
    COPULAS,
    Copula,
    LatentDraw,
    check_correlation,
    correlation_factor,
)

__all__ = ["COPULAS", "Copula", "LatentDraw", "check_correlation", "correlation_factor"]
