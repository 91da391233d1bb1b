"""The importance-sampling likelihood ratios themselves, proposal family by proposal family.

For draws from a proposal g weighted by w = f/g (the ratio the estimator reports), two facts of
importance sampling must hold whatever the proposal (common practice; e.g. Asmussen and Glynn
2007, ch. V): E_g[w] = 1, and E_g[w h] = E_f[h] for a test function h. The second is checked
against crude draws from the model f itself (an independent sample), with a tolerance of 4
combined standard errors of the two sample means.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
import pytest

from core.counts import Binomial, ClaimCount, NegativeBinomial, Poisson
from core.estimators.conditional import Conditioning
from core.estimators.conditional_is import DEFENSIVE, capped_family
from core.estimators.mixture import TiltFamily
from core.integrated_tail import IntegratedTail
from core.portfolio import Line, Portfolio
from core.sampling import LineProposal, StepwiseTilt, TiltGrid, draw_block, draw_claims
from core.severities import Capped, Exponential, Gamma, Lognormal, Normal, Pareto, Severity

# Claims and counts are cheap to draw: enough of them that a 1% error in a normalising
# constant shows (about 5 standard errors); whole portfolios cost more.
N = 400_000
N_PORTFOLIO = 40_000
K = 4.0


def mean_se(v: np.ndarray) -> tuple[float, float]:
    return float(v.mean()), float(v.std(ddof=1) / math.sqrt(v.size))


def check_unit_mean(w: np.ndarray) -> None:
    m, se = mean_se(w)
    assert se > 0.0, "a ratio with no spread tests nothing"
    assert abs(m - 1.0) <= K * se, (m, se)


def check_matches_crude(weighted: np.ndarray, crude: np.ndarray) -> None:
    a, sa = mean_se(weighted)
    b, sb = mean_se(crude)
    assert b > 0.0, "the test function must not vanish under the model"
    assert abs(a - b) <= K * math.hypot(sa, sb), (a, sa, b, sb)


def claim_cases() -> list[tuple[str, Severity, Callable[[Severity], StepwiseTilt]]]:
    # A capped tilt of a heavy tail (conditional_is), a full-grid tilt of a law with an atom
    # at its cap (tilted with a per-claim limit), and a full-grid tilt of a light law.
    return [
        ("lognormal capped tilt", Lognormal(mu=0.0, sigma=1.5),
         lambda s: StepwiseTilt(TiltGrid(s, 8.0), 0.4)),
        ("capped gamma", Capped(base=Gamma(shape=2.0, scale=1.0), cap=4.0),
         lambda s: StepwiseTilt.for_severity(s, 0.6)),
        ("pareto capped tilt", Pareto(alpha=2.5, scale=1.0),
         lambda s: StepwiseTilt(TiltGrid(s, 5.0, cells=64), 0.8)),
        # drawn within cells by rejection (a decreasing density), not by inversion
        ("integrated gamma tail capped tilt", IntegratedTail(base=Gamma(shape=3.0, scale=1.0)),
         lambda s: StepwiseTilt(TiltGrid(s, 20.0), 0.3)),
    ]


@pytest.mark.parametrize(("sev", "make"), [c[1:] for c in claim_cases()],
                         ids=[c[0] for c in claim_cases()])
def test_stepwise_tilt_ratio_has_unit_mean_and_reweights_to_the_model(
    sev: Severity, make: Callable[[Severity], StepwiseTilt],
) -> None:
    step = make(sev)
    rng = np.random.default_rng(11)
    y, log_fg = step.sample(N, rng)
    w = np.exp(log_fg)
    check_unit_mean(w)
    crude = np.asarray(sev.sample(N, np.random.default_rng(12)), dtype=float)
    t = float(sev.isf(0.1))  # below the cap of the capped law
    # A tail event and a bounded smooth function of the claim.
    check_matches_crude(w * (y > t), (crude > t).astype(float))
    check_matches_crude(w * np.minimum(y, 3.0), np.minimum(crude, 3.0))


@pytest.mark.parametrize("sev,theta", [
    (Gamma(shape=2.0, scale=1.0), 0.5),
    (Exponential(mean=2.0), 0.3),
    (Normal(mean=1.0, sd=2.0), 0.4),
], ids=["gamma", "exponential", "normal"])
def test_closed_form_claim_tilt_ratio_has_unit_mean_and_reweights_to_the_model(
    sev: Severity, theta: float,
) -> None:
    y, log_fg = draw_claims(sev, LineProposal(claim_tilt=theta), N, np.random.default_rng(21),
                            None)
    assert log_fg is not None
    w = np.exp(log_fg)
    check_unit_mean(w)
    crude = np.asarray(sev.sample(N, np.random.default_rng(22)), dtype=float)
    t = float(sev.isf(0.1))
    check_matches_crude(w * (y > t), (crude > t).astype(float))


@pytest.mark.parametrize("law,s", [
    (Poisson(mean=4.0), 0.5),
    (NegativeBinomial(mean=4.0, dispersion=2.0), 0.2),
    (Binomial(trials=20, probability=0.2), 0.7),
], ids=["poisson", "negative_binomial", "binomial"])
def test_tilted_count_ratio_has_unit_mean_and_reweights_to_the_model(
    law: ClaimCount, s: float,
) -> None:
    n = np.asarray(law.tilted(s).sample(N, np.random.default_rng(31)))
    w = np.exp(-s * n + float(law.log_mgf(s)))
    check_unit_mean(w)
    crude = np.asarray(law.sample(N, np.random.default_rng(32)))
    cut = float(np.quantile(crude, 0.9))
    check_matches_crude(w * (n > cut), (crude > cut).astype(float))


def light_portfolio() -> Portfolio:
    return Portfolio(lines=[
        Line(count=Poisson(mean=6.0), severity=Gamma(shape=2.0, scale=1.0)),
        Line(count=Poisson(mean=3.0), severity=Lognormal(mu=0.0, sigma=0.5), limit=3.0),
    ])


def heavy_portfolio() -> Portfolio:
    return Portfolio(lines=[
        Line(count=Poisson(mean=3.0), severity=Lognormal(mu=0.0, sigma=1.2)),
        Line(count=Poisson(mean=5.0), severity=Gamma(shape=2.0, scale=1.0)),
    ])


def test_tilt_mixture_ratio_has_unit_mean_and_reweights_to_the_model() -> None:
    # Two exponential-tilt components (closed form for the gamma line, a stepwise grid for the
    # capped lognormal line) plus a defensive share of the model: the balance-heuristic ratio.
    port = light_portfolio()
    grids: dict[int, TiltGrid | None] = {
        0: None, 1: TiltGrid.for_tilt(port.lines[1].paid_severity, 0.5)}
    family = TiltFamily(port, grids)
    draw = family.draw([0.2, 0.5], N_PORTFOLIO, np.random.default_rng(41), defensive=0.1)
    w = np.exp(draw.log_lr)
    check_unit_mean(w)
    crude = draw_block(port, N_PORTFOLIO, np.random.default_rng(42)).total
    x = float(np.quantile(crude, 0.95))
    check_matches_crude(w * (draw.total > x), (crude > x).astype(float))
    check_matches_crude(w * np.minimum(draw.total, 25.0), np.minimum(crude, 25.0))


def test_capped_tilt_mixture_of_conditional_is_reweights_to_the_size_biased_model() -> None:
    # conditional_is draws every claim but the conditioned one from a capped tilt, with the
    # conditioned line's count size-biased minus one; the model it reweights to is the same
    # size-biased draw without the tilt.
    port = heavy_portfolio()
    cond = Conditioning(port)
    x = 60.0
    family = capped_family(cond, x)
    theta = family.theta_for(x)
    assert theta > 0.0
    rng = np.random.default_rng(51)
    j = cond.choose(N_PORTFOLIO, rng)
    draw = family.draw([theta], N_PORTFOLIO, rng, j, defensive=DEFENSIVE)
    w = np.exp(draw.log_lr)
    check_unit_mean(w)
    rng2 = np.random.default_rng(52)
    j2 = cond.choose(N_PORTFOLIO, rng2)
    crude = draw_block(port, N_PORTFOLIO, rng2, size_biased=j2).total
    t = float(np.quantile(crude, 0.95))
    check_matches_crude(w * (draw.total > t), (crude > t).astype(float))
    # The defensive share caps the ratio at 1 / DEFENSIVE (Hesterberg 1995).
    assert float(w.max()) <= 1.0 / DEFENSIVE * (1 + 1e-12)


def test_big_claim_component_reweights_to_the_model_where_a_second_claim_is_large() -> None:
    # conditional_is draws a share of its samples with one other claim from the tail above t
    # (core.big_claim); its exact density ratio enters the balance-heuristic weight. Outside
    # reference: for 10 fixed lognormal(0, 1) claims the 9 other claims are iid, so
    # P(max of them > s) = 1 - F(s)^9 with F from scipy.stats.lognorm.
    from scipy import stats

    from core.counts import Fixed

    port = Portfolio(lines=[Line(count=Fixed(n=10), severity=Lognormal(mu=0.0, sigma=1.0))])
    cond = Conditioning(port)
    x = 60.0
    family = capped_family(cond, x)
    assert family.big is not None and family.big.t < x / 2
    theta = family.theta_for(x)
    rng = np.random.default_rng(61)
    j = cond.choose(N_PORTFOLIO, rng)
    draw = family.draw([theta], N_PORTFOLIO, rng, j, defensive=DEFENSIVE)
    w = np.exp(draw.log_lr)
    check_unit_mean(w)
    for s in (x / 3.0, x / 2.0, x):
        truth = -math.expm1(9.0 * float(stats.lognorm(1.0).logcdf(s)))
        m, se = mean_se(w * (draw.line_max[0] > s))
        assert se > 0.0
        assert abs(m - truth) <= K * se, (s, m, se, truth)
        # The component makes the region common: far more hits than the model's own rate.
        assert np.count_nonzero(draw.line_max[0] > s) > 10 * truth * N_PORTFOLIO
    assert float(w.max()) <= 1.0 / DEFENSIVE * (1 + 1e-12)
