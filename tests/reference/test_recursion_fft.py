"""method=recursion on fine grids by FFT (core.recursion_fft) against outside references.

- Poisson(100) gamma(2, 1) claims: given N = n, S is gamma(2 n, 1) exactly (the gamma law of a
  sum of gammas), so P(S > x) = sum_n P(N = n) Q(2 n, x), summed with scipy.
- Negative binomial lognormal: Panjer's recursion by direct sums on the same grid (core.recursion,
  an independent algorithm on the same rounded claims) must agree within the FFT's stated slack.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import fft as sp_fft
from scipy import special, stats

from core import Gamma, Line, Lognormal, NegativeBinomial, Poisson, Portfolio, Precision
from core.discretise import Grid
from core.exceedance import exceedance
from core.recursion import aggregate
from core.recursion_fft import ClaimCells, _measure, _slack, wrapped_mass


def _gamma_book() -> Portfolio:
    return Portfolio(lines=[Line(count=Poisson(mean=100.0), severity=Gamma(shape=2.0, scale=1.0))])


def _gamma_truth(x: float) -> float:
    n = np.arange(1, 400)
    # scipy: Poisson weights and the regularised upper incomplete gamma Q(2n, x)
    return float(stats.poisson.pmf(n, 100.0) @ special.gammaincc(2.0 * n, x))


def test_fine_bounds_contain_the_gamma_mixture_and_meet_the_target() -> None:
    book = _gamma_book()
    x = 260.0
    res = exceedance(book, [x], method="recursion", precision=Precision(relative_error=2e-3))
    e = res.estimates[0]
    truth = _gamma_truth(x)
    assert e.ci_low <= truth <= e.ci_high, (e, truth)
    assert e.ci_low <= e.value <= e.ci_high
    assert res.stopped_by == "relative_error"
    assert (e.ci_high - e.ci_low) / 2 <= 2e-3 * e.value
    assert e.std_error is None


def test_a_short_time_limit_stops_with_what_it_reached() -> None:
    book = _gamma_book()
    x = 298.0
    res = exceedance(book, [x], method="recursion",
                     precision=Precision(relative_error=1e-5, time_limit_s=1.0))
    e = res.estimates[0]
    truth = _gamma_truth(x)
    assert res.stopped_by == "time_limit"
    assert e.ci_low <= truth <= e.ci_high, (e, truth)
    assert any("time limit" in w for w in res.warnings)


def test_transform_agrees_with_direct_panjer_sums_within_its_slack() -> None:
    book = Portfolio(lines=[Line(count=NegativeBinomial(mean=20.0, dispersion=3.0),
                                 severity=Lognormal(mu=1.0, sigma=1.2))])
    x, cells = 360.0, 8192
    direct = aggregate(book, Grid.with_top(top=x, cells=cells), "up", exact_tail=True).beyond
    claims = [ClaimCells(book, 0, x, cells)]
    length = int(sp_fft.next_fast_len(16 * cells))
    g, log_e = _measure(claims, "up", length)
    by_fft = -math.expm1(log_e) + float(np.sum(g[cells + 1:]))
    room = _slack(claims, g, length - cells - 1) + wrapped_mass(claims, x / cells, length)
    assert abs(by_fft - direct) <= room, (by_fft, direct, room)
    assert room < 1e-6 * direct  # and small next to the figure
