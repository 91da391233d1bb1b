"""Fitting checks against outside references, over seeded repeats (bounded in number):

- truncated and censored likelihoods recover known parameters, with Wald intervals whose
  coverage is near 95% and standard errors that match the spread over repeats (the
  asymptotic normality of the MLE, e.g. Cox and Hinkley 1974, ch. 9);
- bootstrap goodness-of-fit p-values are uniform under the null (scipy.stats.kstest);
- Hill's estimate and the GPD fit recover the tail index of exact Pareto samples (the
  exceedances of a Pareto law over u are exactly generalized Pareto with xi = 1/alpha and
  scale u/alpha: Pickands 1975);
- parameter draws reproduce the closed-form law of a quantile under a normal mean error.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from core import Fixed, Line, Lognormal, Portfolio
from core.fitting import gof
from core.fitting.data import ClaimData, claim_data
from core.fitting.severity_fit import fit_severity, model
from core.fitting.tail import hill, tail_diagnostics
from core.parameter_risk import Figure, ParameterUncertainty, draw_portfolios, nested

Z95 = 1.959963984540054


def _truncated_censored(rng, law, n, threshold, limit) -> ClaimData:
    # Ground-up draws above the threshold by inversion in the tail, capped at the limit.
    v = rng.random(n)
    x = law.isf(v * law.sf(threshold))
    return claim_data(list(np.minimum(x, limit)), reporting_threshold=threshold,
                      censored_at=[limit] * n)


CASES = {
    # family, scipy law, truth, threshold, limit
    "lognormal": (stats.lognorm(1.0, scale=math.e), [1.0, 1.0], 1.0, math.exp(2.5)),
    "weibull": (stats.weibull_min(0.7, scale=2.0), [0.7, 2.0], 0.5, 8.0),
}


@pytest.mark.parametrize("family", sorted(CASES))
def test_truncated_censored_fits_cover_the_truth(family):
    law, truth, threshold, limit = CASES[family]
    truth = np.asarray(truth)
    repeats, n = 80, 400
    est, se = [], []
    for r in range(repeats):
        rng = np.random.default_rng(np.random.SeedSequence(1717, spawn_key=(r,)))
        fit = fit_severity(family, _truncated_censored(rng, law, n, threshold, limit))
        assert fit.covariance is not None
        est.append(fit.theta)
        se.append(np.sqrt(np.diag(fit.covariance)))
    est, se = np.asarray(est), np.asarray(se)
    z = (est - truth) / se
    # Within 3 SE: 0.27% of 2 x 80 estimates fall outside under normality (0.4 expected);
    # 4 or more has probability about 0.001 (binomial).
    assert int(np.sum(np.abs(z) > 3)) <= 3
    # Wald coverage: binomial(80, 0.95) per parameter, 4 standard errors of the proportion.
    coverage = np.mean(np.abs(z) <= Z95, axis=0)
    assert np.all(np.abs(coverage - 0.95) <= 4 * math.sqrt(0.95 * 0.05 / repeats)), coverage
    # Reported SE vs the spread over repeats: the sample SD has relative error about
    # 1 / sqrt(2 (R - 1)); 4 of those.
    ratio = est.std(axis=0, ddof=1) / np.sqrt(np.mean(se**2, axis=0))
    assert np.all(np.abs(ratio - 1) <= 4 / math.sqrt(2 * (repeats - 1))), ratio


def test_bootstrap_p_values_are_uniform_under_the_null():
    law = stats.lognorm(0.8, scale=math.exp(1.0))
    m = model("lognormal")
    pvalues = {"ks": [], "cvm": [], "ad": []}
    for r in range(50):
        rng = np.random.default_rng(np.random.SeedSequence(99, spawn_key=(r,)))
        v = rng.random(60)
        x = law.isf(v * law.sf(1.5))
        data = claim_data(list(x), reporting_threshold=1.5)
        fit = m.fit(data)
        tests, _ = gof.bootstrap_tests(fit.severity, data, m.refitter(fit), replicates=19,
                                       max_claims=500, seed=r, key=0)
        for k in pvalues:
            pvalues[k].append(tests[k].p_value)
    for k, p in pvalues.items():
        # Source: scipy.stats.kstest against the uniform law. The p-values are multiples of
        # 1/20, which adds at most 0.05 to the KS distance; a 0.001 level leaves room for it.
        assert stats.kstest(p, "uniform").pvalue > 1e-3, (k, p)


def test_hill_and_gpd_recover_the_pareto_tail_index():
    alpha, xm, n = 2.0, 1.0, 20_000
    rng = np.random.default_rng(4242)
    x = xm * rng.random(n) ** (-1.0 / alpha)  # exact Pareto (type I) by inversion
    k = 2000
    xi = hill(x, k)
    # Hill (1975): asymptotically normal with SE xi / sqrt(k), unbiased for exact Pareto.
    assert abs(xi - 1 / alpha) <= 4 * (1 / alpha) / math.sqrt(k)
    u = float(np.quantile(x, 0.9))
    exc = x[x > u] - u
    fit = fit_severity("generalized_pareto", claim_data(list(exc)))
    se = np.sqrt(np.diag(fit.covariance))
    # Pickands (1975): the excesses are exactly GPD(xi = 1/alpha, scale = u / alpha).
    assert abs(fit.theta[0] - 1 / alpha) <= 4 * se[0]
    assert abs(fit.theta[1] - u / alpha) <= 4 * se[1]
    diag = tail_diagnostics(claim_data(list(x[:4000])))
    assert diag.hill_xi is not None and diag.gpd_shape
    for point in diag.gpd_shape:  # every threshold's interval is about the same xi
        assert point.ci_low is not None and point.ci_high is not None
        assert point.ci_low - 0.25 <= 1 / alpha <= point.ci_high + 0.25


def test_parameter_interval_of_a_quantile_matches_the_closed_form():
    # VaR_q of one lognormal claim is exp(mu + sigma z_q). With mu uncertain (sd s) and sigma
    # known, log VaR_q is normal with sd s, so the parameter interval is VaR exp(-+1.96 s)
    # (closed form of the lognormal quantile; scipy.stats.norm). The figure of each draw is
    # the drawn law's exact quantile, so the test isolates the draws and their combination.
    mu, sigma, s, q, draws = 2.0, 0.5, 0.1, 0.995, 1000
    portfolio = Portfolio(lines=[Line(count=Fixed(n=1), severity=Lognormal(mu=mu, sigma=sigma))])
    var = math.exp(mu + sigma * stats.norm.ppf(q))
    central = Figure(value=var, ci_low=var * 0.999, ci_high=var * 1.001)

    def quantile(p: Portfolio) -> Figure:
        x = float(p.lines[0].severity.ppf(q))
        return Figure(value=x, ci_low=x, ci_high=x)

    out = nested(quantile, lambda f: [f], central, portfolio,
                 {0: ParameterUncertainty(covariance=[[s**2, 0.0], [0.0, 0.0]], draws=draws)},
                 seed=5)
    p = out.intervals[0]
    assert p is not None and p.draws == draws
    # The 2.5% point of n normal draws has SE sqrt(p(1-p)/n) / phi(z) (in sd units): 4 of them.
    tol = 4 * math.sqrt(0.025 * 0.975 / draws) / stats.norm.pdf(Z95)
    assert abs(math.log(p.parameter_low / var) / s + Z95) <= tol
    assert abs(math.log(p.parameter_high / var) / s - Z95) <= tol
    # The combined interval holds the sampling interval and the parameter range.
    assert p.ci_low <= min(p.sampling_low, p.parameter_low) + 1e-9
    assert p.ci_high >= max(p.sampling_high, p.parameter_high) - 1e-9
    assert p.dominant == "parameter"


def test_parameter_draws_have_the_stated_covariance():
    # Positive parameters are drawn on the log scale (delta method); for a small covariance
    # the natural-scale draws keep it to first order. Reference: the sample covariance of
    # 2000 draws, whose entries have relative SE about sqrt(2 / 2000) = 3%.
    cov = np.array([[0.02**2, 0.3 * 0.02 * 0.01], [0.3 * 0.02 * 0.01, 0.01**2]])
    portfolio = Portfolio(lines=[Line(count=Fixed(n=1), severity=Lognormal(mu=1.0, sigma=1.0))])
    drawn, skipped = draw_portfolios(
        portfolio, {0: ParameterUncertainty(covariance=cov.tolist(), draws=2000)}, seed=3)
    theta = np.array([[p.lines[0].severity.mu, p.lines[0].severity.sigma] for p in drawn])
    assert skipped == 0
    sample = np.cov(theta.T)
    assert np.all(np.abs(np.sqrt(np.diag(sample)) / np.sqrt(np.diag(cov)) - 1) <= 4 * 0.016)
    assert abs(np.corrcoef(theta.T)[0, 1] - 0.3) <= 4 * (1 - 0.3**2) / math.sqrt(2000)
